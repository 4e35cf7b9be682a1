"""Excel workbooks (.xlsx), read with openpyxl."""

from __future__ import annotations

import re
import warnings
import zipfile
import zlib
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
import pandas as pd
from openpyxl import load_workbook
from openpyxl.utils import get_column_letter

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import ReadFailure, SourceFile, attach_failures, cell_text, text_frame, unique_names
from integrate.sources.limits import ReadLimits, check_columns, over, read_limits
from integrate.sources.sheet_cells import FAST_MAX_BYTES, SheetContext, read_sheet_grid

_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"  # compound file: an old .xls, or an encrypted .xlsx
_FORMULA_TAG = re.compile(rb"<(?:[A-Za-z0-9_]+:)?f[\s>/]")  # <f>, <f t="shared" .../>, <x:f>


def read_workbook(path: Path, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read one sheet; the first non-empty row is the header, ``_row`` is the sheet row.

    Cells are read as their stored values (a formula gives its last computed result). A formula
    cell with no stored result (a file written by a script and never opened in a spreadsheet) is
    left empty and listed as a failure naming the cell (reason ``formula_without_value``).
    Date cells become ``YYYY-MM-DD`` (``YYYY-MM-DDTHH:MM:SS`` when the time is not midnight),
    whole numbers lose the ``.0`` Excel stores them with.

    Raises:
        SourceError: ``missing_sheet`` (listing the sheets), ``bad_file`` (not an .xlsx, or its
            sheet cannot be parsed), ``encrypted_file`` (password-protected), ``file_too_large``.
    """
    limits = read_limits()
    with path.open("rb") as handle:
        if handle.read(8) == _OLE_MAGIC:
            raise SourceError(
                f"source '{src.name}' is a password-protected workbook or an old .xls file",
                file=src.shown,
                reason="encrypted_file",
                hint="remove the password (or save as Excel Workbook .xlsx) and export again",
            )
    with path.open("rb") as handle:  # closed here even when openpyxl gives up half-way
        cells, formulas = _read_cells(handle, path, spec, src, limits)
    if isinstance(cells, np.ndarray):
        filled = np.flatnonzero(np.not_equal(cells, None).any(axis=1)) if cells.size else []
        header_at = int(filled[0]) if len(filled) else None
        grid = cells
    else:
        header_at = next((i for i, row in enumerate(cells) if any(v is not None for v in row)), None)
    if header_at is None:
        return text_frame(pd.DataFrame(), [], src)
    if not isinstance(cells, np.ndarray):
        width = max(len(row) for row in cells)
        check_columns(width, limits, src.shown, src.name)
        # rows can be shorter than the widest one when the sheet does not record its size
        grid = np.full((len(cells), width), None, dtype=object)
        for r, row in enumerate(cells):  # openpyxl's rows, when the sheet is not read in bulk
            grid[r, : len(row)] = row
    width = grid.shape[1]
    check_columns(width, limits, src.shown, src.name)
    header = [cell_text(v).strip() if v is not None else "" for v in grid[header_at]]
    names = unique_names(
        [text or f"column_{get_column_letter(i + 1)}" for i, text in enumerate(header)]
    )
    body = grid[header_at + 1 :]
    frame = pd.DataFrame(body, columns=range(width), dtype=object)
    frame.columns = names
    first_data_row = header_at + 2  # sheet rows are 1-based; the header takes one
    lost = _formulas_without_values(cells, formulas, header_at, names) if formulas else []
    # a column without a header and without values is formatting residue, not data
    residue = [n for n, text in zip(names, header) if not text and not frame[n].notna().any()
               and not any(f[1] == n for f in lost)]
    frame = frame.drop(columns=residue)
    out = text_frame(frame, range(first_data_row, first_data_row + len(body)), src)
    if lost:
        attach_failures(out, lost)
    return out


def _read_cells(handle: BinaryIO, path: Path, spec: ReadSpec, src: SourceFile, limits: ReadLimits
                ) -> tuple[list[tuple[object, ...]] | np.ndarray, list[tuple[object, ...]]]:
    """Every row of the sheet as stored values, and (when the sheet has formulas) as formula text.

    A sheet without formulas is read in bulk (``sheet_cells``: a grid, one row per sheet row);
    one that layout does not cover, row by row through openpyxl.
    """
    try:
        with warnings.catch_warnings():
            # openpyxl warns about features it does not read (data validation, styles);
            # they do not change cell values
            warnings.filterwarnings("ignore", category=UserWarning, module="openpyxl")
            book = load_workbook(handle, read_only=True, data_only=True)
    except Exception as exc:  # noqa: BLE001 - any failure of the parser on a hostile file is a bad file
        raise _bad_file(src, exc) from exc
    try:
        sheet = book[_sheet_name(book.sheetnames, spec.sheet, src)]
        member = getattr(sheet, "_worksheet_path", None)
        _check_sheet_xml(path, member, limits, src, scan=False)  # the size limit, before anything unpacks
        try:
            # a sheet holding formulas is never read in bulk (a cell with <f> is left to openpyxl)
            grid = _read_in_bulk(path, member, book, sheet, limits) if member else None
            if grid is not None:
                return grid, []
        except SourceError:
            raise
        except Exception as exc:  # noqa: BLE001 - openpyxl failed on the parts around the cells
            raise _bad_file(src, exc) from exc
        has_formulas = _check_sheet_xml(path, member, limits, src)
        try:
            # openpyxl reads cell by cell; this is the only way to it, as inside pandas
            cells = list(sheet.iter_rows(min_row=1, values_only=True))
            formulas: list[tuple[object, ...]] = []
            if has_formulas:
                # the sheet parser reads this flag (openpyxl 3.1 has no setter): the same sheet again,
                # formulas as text; tests/bad_input/test_lost_values.py fails if this stops working
                book._data_only = False
                formulas = list(sheet.iter_rows(min_row=1, values_only=True))
        except SourceError:
            raise
        except Exception as exc:  # noqa: BLE001 - corrupt or cut-short sheet XML in an intact zip
            raise _bad_file(src, exc) from exc
    finally:
        book.close()

    return cells, formulas


def _read_in_bulk(path: Path, member: str, book: Any, sheet: Any, limits: ReadLimits) -> np.ndarray | None:
    """The sheet's cells by ``sheet_cells`` (None: the layout is left to openpyxl)."""
    try:
        data = _unpack(path, member)
    except (KeyError, zipfile.BadZipFile, OSError, EOFError, zlib.error):
        return None  # the careful way reports it
    if data is None:
        return None
    context = SheetContext(
        shared_strings=sheet._shared_strings, epoch=book.epoch, date_styles=book._date_formats,
        timedelta_styles=book._timedelta_formats, max_row=sheet.max_row, max_col=sheet.max_column,
        max_columns=limits.max_columns)
    return read_sheet_grid(data, context)


def _unpack(path: Path, member: str) -> bytearray | None:
    with zipfile.ZipFile(path) as archive:
        info = archive.getinfo(member.lstrip("/"))
        if info.file_size > FAST_MAX_BYTES:
            return None
        # unpacked into one buffer of the stated size (reading it whole would hold it twice)
        data = bytearray(info.file_size)
        view = memoryview(data)
        at = 0
        with archive.open(info) as xml:
            while at < len(data) and (chunk := xml.read(min(1 << 20, len(data) - at))):
                view[at:at + len(chunk)] = chunk
                at += len(chunk)
            if at != len(data) or xml.read(1):
                return None  # the stated size is wrong: openpyxl reads it (and fails as it does)
    return data


def _bad_file(src: SourceFile, exc: BaseException) -> SourceError:
    detail = str(exc) or type(exc).__name__
    return SourceError(
        f"source '{src.name}' is not a readable .xlsx workbook ({type(exc).__name__}: {detail[:200]})",
        file=src.shown,
        reason="bad_file",
        hint="open the file in a spreadsheet and save it again as Excel Workbook (.xlsx); "
        "older .xls files are not read",
    )


def _check_sheet_xml(path: Path, member: str | None, limits: ReadLimits, src: SourceFile, *,
                     scan: bool = True) -> bool:
    """Refuse a sheet that unpacks to more than the limit (a zip bomb); say whether it holds formulas.

    ``scan=False`` checks the size only (and says False).
    """
    if not member:
        return scan  # cannot tell: look for formulas the slow way
    try:
        with zipfile.ZipFile(path) as archive:
            info = archive.getinfo(member.lstrip("/"))
            if over(info.file_size, limits.max_xlsx_bytes):
                raise SourceError(
                    f"the sheet of source '{src.name}' unpacks to {info.file_size:,} bytes, more than the limit "
                    f"of {limits.max_xlsx_bytes:,}",
                    file=src.shown,
                    reason="file_too_large",
                    hint="check the file; raise INTEGRATE_MAX_XLSX_BYTES if the sheet really is this large",
                )
            if not scan:
                return False
            tail = b""
            with archive.open(info) as xml:
                while chunk := xml.read(1 << 20):
                    if _FORMULA_TAG.search(tail + chunk):
                        return True
                    tail = chunk[-16:]
    except (KeyError, zipfile.BadZipFile, OSError, EOFError, zlib.error) as exc:
        raise _bad_file(src, exc) from exc
    return False


def _formulas_without_values(values: list[tuple[object, ...]], formulas: list[tuple[object, ...]],
                             header_at: int, names: list[str]) -> list[ReadFailure]:
    """Cells that hold a formula but no stored result: (sheet row, column, formula, reason, message)."""
    lost: list[ReadFailure] = []
    for r, (stored, written) in enumerate(zip(values, formulas)):
        if r <= header_at:
            continue
        for c, (value, formula) in enumerate(zip(stored, written)):
            if value is None and formula is not None and _is_formula(formula):
                cell = f"{get_column_letter(c + 1)}{r + 1}"
                text = formula if isinstance(formula, str) else str(getattr(formula, "text", formula))
                lost.append(ReadFailure(
                    r + 1, names[c], text[:200], "formula_without_value",
                    f"cell {cell} holds the formula {text[:60]!r} but no stored result (the file was never "
                    "recalculated); open it in a spreadsheet, save, and export again"))
    return lost


def _is_formula(value: object) -> bool:
    if isinstance(value, str):
        return value.startswith("=")
    return type(value).__name__ in ("ArrayFormula", "DataTableFormula")


def _sheet_name(available: list[str], wanted: str | int | None, src: SourceFile) -> str:
    """The sheet the spec asks for (default: the first); error listing the sheets if absent."""
    if wanted is None and available:
        return available[0]
    if isinstance(wanted, int) and 0 <= wanted < len(available):
        return available[wanted]
    if isinstance(wanted, str) and wanted in available:
        return wanted
    listed = ", ".join(f"'{name}'" for name in available)
    raise SourceError(
        f"sheet {wanted!r} not found in source '{src.name}' (sheets: {listed})",
        file=src.shown,
        value=wanted,
        reason="missing_sheet",
        hint="set `sheet` to one of the sheet names, or to a 0-based sheet index",
    )
