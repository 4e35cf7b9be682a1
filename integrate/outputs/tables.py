"""Write output files atomically and durably: a temporary name first, fsync, then a rename.

Every CSV and Excel file written here has its formula-like text cells quoted (``cells.py``);
Parquet files keep the values as they are (no spreadsheet opens them).
"""

from __future__ import annotations

import csv
import json
import os
import tempfile
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from ..killpoints import reached
from .cells import any_text_holds, guard_enabled, is_text, neutralise_cells, neutralise_frame
from .csv_text import TextArrays, text_array, text_arrays, text_columns, write_text_columns


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


def parquet_table(frame: pd.DataFrame, known: TextArrays | None = None) -> pa.Table:
    """The arrow table ``_parquet_ready(frame).to_parquet(index=False)`` would write: same schema and metadata.

    Text columns go to arrow straight from their values; through pandas' string dtype they would be
    copied and checked twice, which for the 5 million candidate pairs took seconds per column.
    The schema, pandas metadata included, is the one pandas gives the same columns with no rows.
    ``known``: text arrays already made of these very columns (``csv_text.text_arrays``).
    """
    if not frame.columns.is_unique or not all(isinstance(c, str) for c in frame.columns):
        return _with_attrs(pa.Table.from_pandas(_parquet_ready(frame), preserve_index=False), frame)
    schema = pa.Schema.from_pandas(_parquet_ready(frame.iloc[:0]), preserve_index=False)
    direct: dict[str, pa.Array | pa.ChunkedArray] = {}
    for column, field in zip(frame.columns, schema, strict=True):
        text = None
        if field.type == pa.string():
            text = known[column] if known and column in known else text_array(frame[column])
        if text is not None and text.type == pa.string():
            direct[column] = text
    rest = [c for c in frame.columns if c not in direct]
    if rest:
        ready = frame.copy(deep=False)  # the other columns as to_parquet gets them; no column is copied
        for column in rest:
            if ready[column].dtype == object:
                ready[column] = ready[column].astype("string")
        converted = pa.Table.from_pandas(ready, columns=rest, preserve_index=False)
    columns = [direct[c] if c in direct else converted.column(c) for c in frame.columns]
    return _with_attrs(pa.Table.from_arrays(columns, schema=schema), frame)


def _with_attrs(table: pa.Table, frame: pd.DataFrame) -> pa.Table:
    if not frame.attrs:  # pandas keeps a frame's attrs in the file's metadata
        return table
    return table.replace_schema_metadata({**table.schema.metadata, "PANDAS_ATTRS": json.dumps(frame.attrs)})


def with_fixed_decimals(frame: pd.DataFrame) -> pd.DataFrame:
    """Float columns named in ``frame.attrs["decimals"]`` as text with that many decimals.

    A CSV otherwise shows 20 pounds as '20.0' and 164.084 cm as '164.08399999999997'; money
    keeps its currency's minor units ('20.00', ISO 4217). Missing values stay empty.
    """
    places = frame.attrs.get("decimals") or {}
    columns = [c for c in places if c in frame.columns and pd.api.types.is_float_dtype(frame[c])]
    if not columns:
        return frame
    out = frame.copy(deep=False)  # columns are replaced, never changed in place
    for column in columns:
        number = out[column].to_numpy(dtype=float)
        # each distinct number formatted once; told apart by their bits, so -0.0 stays '-0.00'
        codes, bits = pd.factorize(number.view(np.int64))
        text = np.char.mod(f"%.{int(places[column])}f", bits.view(float)).astype(object)
        out[column] = pd.Series(np.where(np.isnan(number), None, text[codes]), index=out.index, dtype="string")
    return out


def write_csv(frame: pd.DataFrame, path: Path, known: TextArrays | None = None) -> None:
    """A CSV with formula-like text cells quoted and fixed decimals where the frame names them.

    Python's CSV writer does not put a value holding a bare carriage return in quotes when lines
    end in ``\n``, so a reader would cut the row there; such a table gets every field quoted.
    The text is made a column at a time (``csv_text.py``), the same bytes as pandas' ``to_csv``;
    a table with a column type that module does not render, or with a carriage return, goes
    through pandas. ``known``: text arrays already made of the frame's columns (``csv_text.text_arrays``).
    """
    fixed = with_fixed_decimals(frame)
    cells = text_columns(fixed, known)  # text columns are the same in both: only numbers got fixed decimals
    if cells is not None:
        texts = [i for i, c in enumerate(fixed.columns) if is_text(fixed[c])]
        columns = list(cells.values())
        if not any(pc.any(pc.match_substring(columns[i], "\r")).as_py() for i in texts):
            guarded = set(texts) if guard_enabled() else set()

            def prepare(i: int, block: pa.Array) -> pa.Array:
                return neutralise_cells(block) if i in guarded else block

            with path.open("wb") as handle:
                write_text_columns(fixed.columns, columns, handle, prepare=prepare)
            return
    safe = neutralise_frame(fixed)
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


def _write_parquet(table: pa.Table, path: Path) -> None:
    pq.write_table(table, path, compression="snappy")  # to_parquet's default compression
    fsync_file(path)


def write_tables(folder: Path, tables: dict[str, tuple[pd.DataFrame, tuple[str, ...]]]) -> list[Path]:
    """Write each table in its formats ("csv", "parquet"); all temporary files are made first.

    Each file is fsynced before the renames, the folder after them. A failure while writing any
    table leaves every previous output in ``folder`` untouched.

    Parquet files are encoded on one worker thread (arrow encodes and compresses without holding
    the GIL) while this thread makes the next tables; the tables with no CSV go first, so that
    the largest encoding (the candidate pairs) runs while the CSV files are made.
    """
    folder.mkdir(parents=True, exist_ok=True)
    staged: list[tuple[Path, Path]] = []
    encoding: list[Future[None]] = []
    order = sorted(tables.items(), key=lambda item: "csv" in item[1][1])  # stable: otherwise as given
    encoder = ThreadPoolExecutor(max_workers=1, thread_name_prefix="parquet")
    try:
        for name, (frame, formats) in order:
            known = text_arrays(frame)
            for fmt in formats:
                final = folder / f"{name}.{fmt}"
                tmp = _temporary(final)
                staged.append((tmp, final))
                if fmt == "csv":
                    write_csv(frame, tmp, known)
                    fsync_file(tmp)
                    reached("write:file")
                elif fmt == "parquet":
                    encoding.append(encoder.submit(_write_parquet, parquet_table(frame, known), tmp))
                else:
                    raise ValueError(f"unknown table format '{fmt}'")
        for job in encoding:
            job.result()  # raises the encoder's error here
            reached("write:file")
        for tmp, final in staged:
            os.replace(tmp, final)
            reached("write:rename")
        fsync_dir(folder)
    finally:
        for job in encoding:
            job.cancel()
        encoder.shutdown(wait=True)  # no thread may still write a temporary file when it is removed
        for tmp, _ in staged:
            if tmp.exists():
                tmp.unlink()
    return [final for _, final in staged]
