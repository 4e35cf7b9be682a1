"""Worksheet cells read in bulk (``sources/sheet_cells.py``) against openpyxl's own reading.

openpyxl is the oracle: for every workbook, the bulk grid must hold exactly the values (and
Python types) that openpyxl's read-only ``iter_rows(values_only=True)`` gives, row for row, or
the bulk reader must step aside (``None``) so that openpyxl reads the sheet.
"""

from __future__ import annotations

import datetime as dt
import io
import zipfile
from pathlib import Path

import pytest
import xlsxwriter
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from openpyxl import Workbook, load_workbook

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources import read_source
from integrate.sources.sheet_cells import SheetContext, read_sheet_grid

SHEET = "xl/worksheets/sheet1.xml"


def _both(path: Path) -> tuple[list[list[object]], list[list[object]] | None]:
    """(openpyxl's rows padded to the widest, the bulk grid as lists or None)."""
    book = load_workbook(path, read_only=True, data_only=True)
    try:
        sheet = book[book.sheetnames[0]]
        rows = [list(r) for r in sheet.iter_rows(min_row=1, values_only=True)]
        with zipfile.ZipFile(path) as archive:
            data = archive.read(sheet._worksheet_path.lstrip("/"))
        context = SheetContext(sheet._shared_strings, book.epoch, book._date_formats, book._timedelta_formats,
                               sheet.max_row, sheet.max_column, 10_000)
        grid = read_sheet_grid(data, context)
    finally:
        book.close()
    width = max((len(r) for r in rows), default=0)
    padded = [r + [None] * (width - len(r)) for r in rows]
    return padded, None if grid is None else grid.tolist()


def _typed(rows: list[list[object]]) -> list[list[tuple[type, object]]]:
    return [[(type(v), v) for v in row] for row in rows]


def _with_sheet(path: Path, xml: str) -> None:
    """Replace the first sheet's XML of the workbook at ``path``."""
    data = path.read_bytes()
    src = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            dst.writestr(item, xml.encode("utf-8") if item.filename == SHEET else src.read(item))
    path.write_bytes(out.getvalue())


# what openpyxl stores: text (XML 1.0 characters, no carriage return), numbers, booleans, dates
CELL = st.one_of(
    st.none(),
    st.text(st.characters(blacklist_categories=("Cs", "Cc"), blacklist_characters="\ufffe\uffff"), max_size=12),
    st.sampled_from(["a & b", "<tag>", "x\"y'z", "  padded  ", "=not a formula", "_x000D_", "é€😀"]),
    st.integers(-10**12, 10**12),
    st.floats(allow_nan=False, allow_infinity=False, width=64),
    st.booleans(),
    st.datetimes(min_value=dt.datetime(1901, 1, 1), max_value=dt.datetime(2100, 1, 1)).map(
        lambda d: d.replace(microsecond=0)),
    st.dates(min_value=dt.date(1901, 1, 1), max_value=dt.date(2100, 1, 1)),
)
TABLE = st.lists(st.lists(CELL, max_size=6), min_size=1, max_size=8)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(table=TABLE, start=st.integers(1, 3))
def test_openpyxl_written_sheets_read_alike(table: list[list[object]], start: int,
                                            tmp_path_factory: pytest.TempPathFactory) -> None:
    path = tmp_path_factory.mktemp("bulk") / "t.xlsx"
    book = Workbook()
    sheet = book.active
    for r, row in enumerate(table, start=start):
        for c, value in enumerate(row, start=1):
            if value is not None:
                cell = sheet.cell(row=r, column=c)
                cell.value = value
                if isinstance(value, str):
                    cell.data_type = "s"
    book.save(path)
    expected, grid = _both(path)
    assert grid is not None
    assert _typed(grid) == _typed(expected)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(table=TABLE)
def test_shared_string_sheets_read_alike(table: list[list[object]], tmp_path_factory: pytest.TempPathFactory) -> None:
    """xlsxwriter stores text in the shared-string table, as spreadsheet programs do."""
    path = tmp_path_factory.mktemp("bulk") / "t.xlsx"
    book = xlsxwriter.Workbook(str(path))
    sheet = book.add_worksheet()
    dates = book.add_format({"num_format": "yyyy-mm-dd hh:mm:ss"})
    for r, row in enumerate(table):
        for c, value in enumerate(row):
            if isinstance(value, str):
                sheet.write_string(r, c, value)
            elif isinstance(value, (dt.date, dt.datetime)):
                sheet.write_datetime(r, c, value, dates)
            elif isinstance(value, bool):
                sheet.write_boolean(r, c, value)
            elif value is not None:
                sheet.write_number(r, c, value)
    book.close()
    expected, grid = _both(path)
    assert grid is not None
    assert _typed(grid) == _typed(expected)


_HEAD = '<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'


@pytest.mark.parametrize("body", [
    # rows and cells without r follow the one before
    '<dimension ref="A1:C4"/><sheetData><row><c t="inlineStr"><is><t>a</t></is></c><c><v>1</v></c></row>'
    '<row><c r="C2"><v>2.5</v></c><c><v>3</v></c></row><row r="4"><c t="b"><v>1</v></c></row></sheetData>',
    # no dimension: each row as wide as its last cell; a gap row between
    '<sheetData><row r="1"><c r="B1" t="str"><v>x</v></c></row><row r="3"><c r="A3"><v>7</v></c>'
    '<c r="D3" t="e"><v>#N/A</v></c></row></sheetData>',
    # a row numbered below an earlier one is skipped; the later of two cells in one place wins
    '<dimension ref="A1:B3"/><sheetData><row r="2"><c r="A2"><v>1</v></c><c r="A2"><v>9</v></c></row>'
    '<row r="1"><c r="A1"><v>5</v></c></row><row r="3"><c r="B3"><v>6</v></c></row></sheetData>',
    # rows past the dimension are cut, and the rest up to it filled
    '<dimension ref="A1:A3"/><sheetData><row r="1"><c r="A1"><v>1</v></c><c r="B1"><v>2</v></c></row>'
    '<row r="5"><c r="A5"><v>5</v></c></row></sheetData>',
    # entities, an empty value, an empty inline string, spaces between tags, extra attributes
    '<dimension ref="A1:D1"/><sheetData>\n <row r="1" spans="1:4" ht="15">\n'
    '<c r="A1" t="inlineStr"><is><t xml:space="preserve"> a &amp; &lt;b&gt; &#233;&#x20AC; </t></is></c>'
    '<c r="B1"><v></v></c><c r="C1" t="inlineStr"><is><t/></is></c><c r="D1" s="0" cm="1"><v>1E3</v></c>'
    '</row>\n</sheetData>',
    '<sheetData/>',
])
def test_hand_written_layouts_read_alike(tmp_path: Path, body: str) -> None:
    path = tmp_path / "t.xlsx"
    Workbook().save(path)
    _with_sheet(path, _HEAD + body + "</worksheet>")
    expected, grid = _both(path)
    assert grid is not None
    assert _typed(grid) == _typed(expected)


@pytest.mark.parametrize("body", [
    '<sheetData><row r="1"><c r="A1"><f>1+1</f><v>2</v></c></row></sheetData>',  # a formula
    '<sheetData><row r="1"><c s="0" r="A1"><v>2</v></c></row></sheetData>',  # attributes in another order
    '<sheetData><row r="1"><c r="A1" t="inlineStr"><is><r><t>rich</t></r></is></c></row></sheetData>',
    '<sheetData><row r="1"><c r="A1" t="d"><v>2024-01-02</v></c></row></sheetData>',  # ISO date cell
    '<x:sheetData xmlns:x="http://schemas.openxmlformats.org/spreadsheetml/2006/main"/>',  # a prefix
])
def test_other_layouts_are_left_to_openpyxl(tmp_path: Path, body: str) -> None:
    path = tmp_path / "t.xlsx"
    Workbook().save(path)
    _with_sheet(path, _HEAD + body + "</worksheet>")
    assert _both(path)[1] is None


def test_a_broken_part_outside_the_cells_fails_as_before(tmp_path: Path) -> None:
    """openpyxl still parses the parts around the cells: a bad one gives openpyxl's error."""
    path = tmp_path / "t.xlsx"
    Workbook().save(path)
    _with_sheet(path, _HEAD + '<sheetData><row r="1"><c r="A1"><v>1</v></c></row></sheetData>'
                '<pageMargins left="wide"/></worksheet>')
    book = load_workbook(path, read_only=True, data_only=True)
    with pytest.raises(TypeError) as direct:
        list(book.active.iter_rows(min_row=1, values_only=True))
    book.close()
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="excel", path="t.xlsx"), tmp_path, name="desk")
    assert (caught.value.file, caught.value.reason) == ("t.xlsx", "bad_file")
    assert f"(TypeError: {direct.value})" in caught.value.message


def test_a_missing_row_in_a_sheet_without_dimension(tmp_path: Path) -> None:
    """openpyxl gives a missing row as an empty list when the sheet has no <dimension>; the reader
    used to fail on it with a TypeError (issue 12, found while reading sheets in bulk)."""
    path = tmp_path / "t.xlsx"
    Workbook().save(path)
    _with_sheet(path, _HEAD + '<sheetData><row r="1"><c r="A1" t="inlineStr"><is><t>id</t></is></c></row>'
                '<row r="3"><c r="A3"><v>7</v></c></row><row r="4"><c r="A4"><f>1+1</f><v>2</v></c></row>'
                '</sheetData></worksheet>')  # the formula sends the sheet through openpyxl
    frame = read_source(ReadSpec(format="excel", path="t.xlsx"), tmp_path, name="desk")
    assert frame["id"].tolist() == ["7", "2"] and frame["_row"].tolist() == [3, 4]
