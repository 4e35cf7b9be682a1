"""Exports for analysts: the merged table as an Excel workbook, or as tables in a SQLite or DuckDB file.

- ``xlsx``: sheet ``merged`` (one row per entity), sheet ``provenance`` (where every merged value
  came from) and sheet ``about`` (the cautions). Text that a spreadsheet would run as a formula
  (a cell starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return) is written with a
  single quote in front, as OWASP's guidance on CSV/formula injection advises, so a hostile value
  in an export is shown, never evaluated. Numbers stay numbers.
- ``sqlite`` / ``duckdb``: tables ``merged``, ``provenance`` and ``crosswalk`` in one database file
  (DuckDB needs the ``duckdb`` package: ``pip install -e ".[exports]"``).

Each file is written under a temporary name beside its destination and renamed into place, so a
failed export leaves any earlier file of that name as it was.
"""

from __future__ import annotations

import os
import re
import sqlite3
import uuid
from collections.abc import Callable
from pathlib import Path

import pandas as pd

from ..errors import InputError
from .report import CAUTIONS

FORMATS = ("xlsx", "sqlite", "duckdb")
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
EXCEL_MAX_ROWS = 1_048_576  # rows per worksheet, header included (Excel's specification and limits)
EXCEL_MAX_CELL = 32_767  # characters per cell (the same page)
_ILLEGAL_XML = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")  # not allowed in the workbook's XML (XML 1.0)


class ExportError(InputError):
    """The export cannot be written as asked (exit code 2)."""

    def __init__(self, message: str, hint: str | None = None) -> None:
        super().__init__(message, reason="bad_export", hint=hint)


def neutralise_text(series: pd.Series) -> pd.Series:
    """Text cells a spreadsheet would treat as a formula get a leading single quote; vectorised."""
    text = series.astype("string")
    risky = text.str.startswith(FORMULA_STARTS).fillna(False)
    return text.where(~risky, "'" + text)


def excel_ready(frame: pd.DataFrame) -> pd.DataFrame:
    """Text columns neutralised, stripped of characters XML cannot hold and cut to Excel's cell size;
    numbers, booleans and dates kept as they are; missing values as empty cells."""
    out = frame.copy()
    for column in out.columns:
        series = out[column]
        if series.dtype == object or isinstance(series.dtype, pd.StringDtype):
            text = neutralise_text(series).str.replace(_ILLEGAL_XML, "\ufffd", regex=True).str.slice(0, EXCEL_MAX_CELL)
            out[column] = text.astype(object).where(text.notna(), None)
        else:
            out[column] = series.astype(object).where(series.notna(), None)
    return out


def _atomic(dest: Path, write: Callable[[Path], None]) -> Path:
    dest.parent.mkdir(parents=True, exist_ok=True)
    tmp = dest.with_name(f".{dest.name}.{uuid.uuid4().hex}.tmp")  # not created: DuckDB wants no empty file
    try:
        write(tmp)
        os.chmod(tmp, 0o600)  # personal data: readable by its owner only, like the run's other outputs
        os.replace(tmp, dest)
    finally:
        for leftover in (tmp, tmp.with_name(tmp.name + ".wal"), tmp.with_name(tmp.name + "-journal")):
            if leftover.exists():
                leftover.unlink()
    return dest


def write_xlsx(dest: Path, merged: pd.DataFrame, provenance: pd.DataFrame) -> Path:
    from openpyxl import Workbook

    for name, frame in (("merged", merged), ("provenance", provenance)):
        if len(frame) + 1 > EXCEL_MAX_ROWS:
            raise ExportError(f"the {name} table has {len(frame)} rows, more than an Excel sheet holds "
                              f"({EXCEL_MAX_ROWS - 1} plus the header)", hint="export to sqlite or duckdb instead")

    def write(tmp: Path) -> None:
        ready = {"merged": excel_ready(merged), "provenance": excel_ready(provenance)}
        book = Workbook(write_only=True)
        try:
            for name, frame in ready.items():
                sheet = book.create_sheet(name)
                sheet.append([str(c) for c in frame.columns])
                for row in frame.itertuples(index=False, name=None):  # the writer takes rows
                    sheet.append(row)
            about = book.create_sheet("about")
            about.append(["Before you use these results"])
            for caution in CAUTIONS:
                about.append([caution])
            about.append(["Text that starts with = + - @ or a tab is shown with a ' in front so that it is never "
                          "run as a formula."])
            book.save(tmp)
        except BaseException:
            for sheet in book.worksheets:  # end each sheet's open writer, so nothing fails later at exit
                rows = getattr(sheet, "_rows", None)
                if rows is not None:
                    rows.close()
            raise

    return _atomic(dest, write)


def _tables(merged: pd.DataFrame, provenance: pd.DataFrame, crosswalk: pd.DataFrame) -> dict[str, pd.DataFrame]:
    out = {}
    for name, frame in (("merged", merged), ("provenance", provenance), ("crosswalk", crosswalk)):
        ready = frame.copy()
        for column in ready.columns:
            if isinstance(ready[column].dtype, pd.StringDtype):
                ready[column] = ready[column].astype(object).where(ready[column].notna(), None)
        out[name] = ready
    return out


def write_sqlite(dest: Path, merged: pd.DataFrame, provenance: pd.DataFrame, crosswalk: pd.DataFrame) -> Path:
    def write(tmp: Path) -> None:
        with sqlite3.connect(tmp) as con:
            for name, frame in _tables(merged, provenance, crosswalk).items():
                frame.to_sql(name, con, index=False)
            con.execute("CREATE INDEX ix_provenance_entity ON provenance(entity_id)")
            con.execute("CREATE INDEX ix_crosswalk_entity ON crosswalk(entity_id)")
        con.close()

    return _atomic(dest, write)


def write_duckdb(dest: Path, merged: pd.DataFrame, provenance: pd.DataFrame, crosswalk: pd.DataFrame) -> Path:
    try:
        import duckdb
    except ImportError as exc:
        raise ExportError("the duckdb export needs the duckdb package",
                          hint='pip install -e ".[exports]", or export to sqlite') from exc

    def write(tmp: Path) -> None:
        con = duckdb.connect(str(tmp))
        try:
            for name, frame in _tables(merged, provenance, crosswalk).items():
                con.register("frame_view", frame)
                con.execute(f'CREATE TABLE "{name}" AS SELECT * FROM frame_view')
                con.unregister("frame_view")
        finally:
            con.close()

    return _atomic(dest, write)


def export_outputs(folder: Path, fmt: str, dest: Path | None = None) -> Path:
    """Export a run's output folder in one format; returns the written file."""
    from ..split import read_output

    if fmt not in FORMATS:
        raise ExportError(f"unknown export format {fmt!r}", hint=f"use one of {', '.join(FORMATS)}")
    merged, provenance = read_output(folder, "merged"), read_output(folder, "provenance")
    dest = dest or folder / f"merged.{fmt}"
    if fmt == "xlsx":
        return write_xlsx(dest, merged, provenance)
    crosswalk = read_output(folder, "crosswalk")
    return (write_sqlite if fmt == "sqlite" else write_duckdb)(dest, merged, provenance, crosswalk)
