"""Excel workbooks (.xlsx), read with openpyxl."""

from __future__ import annotations

import warnings
import zipfile
from pathlib import Path

import pandas as pd
from openpyxl import load_workbook
from openpyxl.utils import get_column_letter
from openpyxl.utils.exceptions import InvalidFileException

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import SourceFile, cell_text, text_frame, unique_names


def read_workbook(path: Path, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read one sheet; the first non-empty row is the header, ``_row`` is the sheet row.

    Cells are read as their stored values (a formula gives its last computed result).
    Date cells become ``YYYY-MM-DD`` (``YYYY-MM-DDTHH:MM:SS`` when the time is not midnight),
    whole numbers lose the ``.0`` Excel stores them with.

    Raises:
        SourceError: ``missing_sheet`` (listing the sheets), ``bad_file`` (not an .xlsx).
    """
    try:
        with warnings.catch_warnings():
            # openpyxl warns about features it does not read (data validation, styles);
            # they do not change cell values
            warnings.filterwarnings("ignore", category=UserWarning, module="openpyxl")
            book = load_workbook(path, read_only=True, data_only=True)
    except (InvalidFileException, zipfile.BadZipFile, KeyError, OSError) as exc:
        raise SourceError(
            f"source '{src.name}' is not a readable .xlsx workbook: {exc}",
            file=src.shown,
            reason="bad_file",
            hint="save the file as Excel Workbook (.xlsx); older .xls files are not read",
        ) from exc
    try:
        sheet = book[_sheet_name(book.sheetnames, spec.sheet, src)]
        # openpyxl reads cell by cell; this is the only way to it, as inside pandas
        cells = list(sheet.iter_rows(min_row=1, values_only=True))
    finally:
        book.close()

    header_at = next((i for i, row in enumerate(cells) if any(v is not None for v in row)), None)
    if header_at is None:
        return text_frame(pd.DataFrame(), [], src)
    width = max(len(row) for row in cells)
    header = [cell_text(v).strip() if v is not None else "" for v in cells[header_at]]
    header += [""] * (width - len(header))
    names = unique_names(
        [text or f"column_{get_column_letter(i + 1)}" for i, text in enumerate(header)]
    )
    # rows can be shorter than the widest one when the sheet does not record its size
    body = [row + (None,) * (width - len(row)) for row in cells[header_at + 1 :]]
    frame = pd.DataFrame(body, columns=range(width), dtype=object)
    frame.columns = names
    # a column without a header and without values is formatting residue, not data
    residue = [n for n, text in zip(names, header) if not text and not frame[n].notna().any()]
    frame = frame.drop(columns=residue)
    first_data_row = header_at + 2  # sheet rows are 1-based; the header takes one
    return text_frame(frame, range(first_data_row, first_data_row + len(body)), src)


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
