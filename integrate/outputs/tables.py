"""Write output tables atomically: every file goes to a temporary name first, then is renamed."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path

import pandas as pd


def write_atomic(path: Path, write: Callable[[Path], None]) -> None:
    """Call ``write`` on a temporary file beside ``path``, then rename it into place."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        write(tmp)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def write_text_atomic(path: Path, text: str) -> None:
    write_atomic(path, lambda p: p.write_text(text, encoding="utf-8"))


def _parquet_ready(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.copy()
    for column in out.columns:
        if out[column].dtype == object:
            out[column] = out[column].astype("string")
    return out


def write_tables(folder: Path, tables: dict[str, tuple[pd.DataFrame, tuple[str, ...]]]) -> list[Path]:
    """Write each table in its formats ("csv", "parquet"); all temporary files are made first.

    A failure while writing any table leaves every previous output untouched.
    """
    folder.mkdir(parents=True, exist_ok=True)
    staged: list[tuple[Path, Path]] = []
    try:
        for name, (frame, formats) in tables.items():
            for fmt in formats:
                final = folder / f"{name}.{fmt}"
                fd, tmp_name = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".tmp", dir=folder)
                os.close(fd)
                tmp = Path(tmp_name)
                staged.append((tmp, final))
                if fmt == "csv":
                    frame.to_csv(tmp, index=False)
                elif fmt == "parquet":
                    _parquet_ready(frame).to_parquet(tmp, index=False)
                else:
                    raise ValueError(f"unknown table format '{fmt}'")
        for tmp, final in staged:
            os.replace(tmp, final)
    finally:
        for tmp, _ in staged:
            if tmp.exists():
                tmp.unlink()
    return [final for _, final in staged]
