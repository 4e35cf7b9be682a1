"""Write output files atomically and durably: a temporary name first, fsync, then a rename.

Every CSV and Excel file written here has its formula-like text cells quoted (``cells.py``);
Parquet files keep the values as they are (no spreadsheet opens them).
"""

from __future__ import annotations

import csv
import os
import tempfile
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

from ..killpoints import reached
from .cells import any_text_holds, neutralise_frame


def fsync_file(path: Path) -> None:
    """Flush a file's content to the disk."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def fsync_dir(path: Path) -> None:
    """Flush a folder's entries (names created, renamed or removed in it) to the disk (POSIX)."""
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:
        return  # a platform that cannot open folders (Windows): its renames are journalled instead
    try:
        os.fsync(fd)
    except OSError:
        pass  # some file systems refuse fsync on a folder; nothing more can be done there
    finally:
        os.close(fd)


def _temporary(path: Path) -> Path:
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    return Path(tmp_name)


def write_atomic(path: Path, write: Callable[[Path], None]) -> None:
    """Call ``write`` on a temporary file beside ``path``, fsync it, then rename it into place."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = _temporary(path)
    try:
        write(tmp)
        fsync_file(tmp)
        os.replace(tmp, path)
        fsync_dir(path.parent)
    finally:
        if tmp.exists():
            tmp.unlink()


def write_text_atomic(path: Path, text: str) -> None:
    write_atomic(path, lambda p: p.write_text(text, encoding="utf-8"))


def _parquet_ready(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.copy(deep=False)  # columns are replaced, never changed in place
    for column in out.columns:
        if out[column].dtype == object:
            out[column] = out[column].astype("string")
    return out


def with_fixed_decimals(frame: pd.DataFrame) -> pd.DataFrame:
    """Float columns named in ``frame.attrs["decimals"]`` as text with that many decimals.

    A CSV otherwise shows 20 pounds as '20.0' and 164.084 cm as '164.08399999999997'; money
    keeps its currency's minor units ('20.00', ISO 4217). Missing values stay empty.
    """
    places = frame.attrs.get("decimals") or {}
    columns = [c for c in places if c in frame.columns and pd.api.types.is_float_dtype(frame[c])]
    if not columns:
        return frame
    out = frame.copy()
    for column in columns:
        number = out[column].to_numpy(dtype=float)
        text = np.char.mod(f"%.{int(places[column])}f", number).astype(object)
        out[column] = pd.Series(np.where(np.isnan(number), None, text), index=out.index, dtype="string")
    return out


def write_csv(frame: pd.DataFrame, path: Path) -> None:
    """A CSV with formula-like text cells quoted and fixed decimals where the frame names them.

    Python's CSV writer does not put a value holding a bare carriage return in quotes when lines
    end in ``\n``, so a reader would cut the row there; such a table gets every field quoted.
    """
    safe = neutralise_frame(with_fixed_decimals(frame))
    if any_text_holds(safe, "\r"):
        safe.to_csv(path, index=False, quoting=csv.QUOTE_ALL)
    else:
        safe.to_csv(path, index=False)


def write_xlsx(sheets: dict[str, pd.DataFrame], path: Path) -> None:
    """An Excel workbook, one sheet per frame, atomically; text is never stored as a formula.

    Text cells go in as strings (``strings_to_formulas`` off) and formula-like ones get a quote
    as in CSV files, so a spreadsheet neither runs them nor shows them as formulas when re-saved.
    """
    def write(tmp: Path) -> None:
        try:
            import xlsxwriter  # noqa: F401 - the 'excel' extra: never turns text into formulas
            options: dict = {"engine": "xlsxwriter", "engine_kwargs": {
                "options": {"strings_to_formulas": False, "strings_to_urls": False}}}
        except ImportError:
            options = {"engine": "openpyxl"}  # text starting with '=' would be a formula: the quote guards it
        with pd.ExcelWriter(tmp, **options) as writer:
            for name, frame in sheets.items():
                neutralise_frame(frame).to_excel(writer, sheet_name=str(name)[:31], index=False)

    write_atomic(path, write)


def write_tables(folder: Path, tables: dict[str, tuple[pd.DataFrame, tuple[str, ...]]]) -> list[Path]:
    """Write each table in its formats ("csv", "parquet"); all temporary files are made first.

    Each file is fsynced before the renames, the folder after them. A failure while writing any
    table leaves every previous output in ``folder`` untouched.
    """
    folder.mkdir(parents=True, exist_ok=True)
    staged: list[tuple[Path, Path]] = []
    try:
        for name, (frame, formats) in tables.items():
            for fmt in formats:
                final = folder / f"{name}.{fmt}"
                tmp = _temporary(final)
                staged.append((tmp, final))
                if fmt == "csv":
                    write_csv(frame, tmp)
                elif fmt == "parquet":
                    _parquet_ready(frame).to_parquet(tmp, index=False)
                else:
                    raise ValueError(f"unknown table format '{fmt}'")
                fsync_file(tmp)
                reached("write:file")
        for tmp, final in staged:
            os.replace(tmp, final)
            reached("write:rename")
        fsync_dir(folder)
    finally:
        for tmp, _ in staged:
            if tmp.exists():
                tmp.unlink()
    return [final for _, final in staged]
