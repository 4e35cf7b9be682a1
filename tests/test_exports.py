"""Analyst exports opened with the libraries that read them: openpyxl, sqlite3, duckdb."""

from __future__ import annotations

import sqlite3
import stat
from pathlib import Path

import duckdb
import openpyxl
import pandas as pd
import pytest

from integrate import cli
from integrate.outputs import exports
from integrate.outputs.exports import export_outputs, neutralise_text

# Cells a spreadsheet would run as formulas: the leading characters OWASP's "CSV Injection" page lists
HOSTILE = ["=HYPERLINK(\"http://example.invalid\",\"x\")", "+1+2", "-3+4", "@SUM(A1:A2)", "\tcmd", "\rcmd"]


def _outputs(folder: Path) -> pd.DataFrame:
    merged = pd.DataFrame({
        "entity_id": [f"E{k}" for k in range(8)],
        "given_name": pd.array(HOSTILE + ["Ann", None], dtype="string"),
        "note": pd.array(["bell\x07here", "plain", None, "x", "y", "z", "w", "v"], dtype="string"),
        "balance_gbp": [-12.5, 3.0, None, 0.0, 1.25, 2.0, 3.0, 4.0],
        "visits": pd.array([1, 2, None, 4, 5, 6, 7, 8], dtype="Int64"),
    })
    provenance = pd.DataFrame({"entity_id": ["E0", "E1"], "field": ["given_name", "given_name"],
                               "value": pd.array([HOSTILE[0], HOSTILE[1]], dtype="string"),
                               "source": ["shop", "club"], "record_id": ["1", "2"]})
    crosswalk = pd.DataFrame({"source": ["shop", "club"], "record_id": ["1", "2"], "entity_id": ["E0", "E1"]})
    folder.mkdir(parents=True)
    for name, frame in (("merged", merged), ("provenance", provenance), ("crosswalk", crosswalk)):
        frame.to_parquet(folder / f"{name}.parquet", index=False)
    return merged


def test_neutralising_prefixes_only_risky_text() -> None:
    out = neutralise_text(pd.Series(HOSTILE + ["Ann", "a=b", None], dtype="string"))
    assert out.tolist()[:6] == ["'" + v for v in HOSTILE]
    assert out.tolist()[6:8] == ["Ann", "a=b"] and pd.isna(out.iloc[8])


def test_workbook_has_merged_and_provenance_sheets_and_no_formula(tmp_path: Path) -> None:
    merged = _outputs(tmp_path / "out")
    path = export_outputs(tmp_path / "out", "xlsx")
    assert path == tmp_path / "out" / "merged.xlsx"
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    book = openpyxl.load_workbook(path)
    assert book.sheetnames == ["merged", "provenance", "about"]
    sheet = book["merged"]
    rows = list(sheet.iter_rows(values_only=True))
    assert rows[0] == tuple(merged.columns)
    # read back, a carriage return arrives as a line feed (XML 1.0, section 2.11, end-of-line handling)
    assert [r[1] for r in rows[1:7]] == ["'" + v.replace("\r", "\n") for v in HOSTILE]
    assert all(cell.data_type != "f" for row in sheet.iter_rows() for cell in row)  # nothing is a formula
    assert rows[1][2] == "bell\ufffdhere"  # a control character XML cannot hold is replaced, not fatal
    assert rows[1][3] == -12.5 and rows[1][4] == 1  # numbers stay numbers, negative ones too
    assert rows[3][3] is None and rows[8][1] is None  # missing values are empty cells
    provenance = list(book["provenance"].iter_rows(values_only=True))
    assert provenance[1][2] == "'" + HOSTILE[0] and provenance[1][3] == "shop"
    assert "personal data" in " ".join(str(r[0]) for r in book["about"].iter_rows(values_only=True))


def test_sqlite_file_holds_the_three_tables_with_values_unchanged(tmp_path: Path) -> None:
    merged = _outputs(tmp_path / "out")
    path = export_outputs(tmp_path / "out", "sqlite", tmp_path / "analysis" / "people.sqlite")
    with sqlite3.connect(path) as con:
        tables = {r[0] for r in con.execute("select name from sqlite_master where type = 'table'")}
        assert tables == {"merged", "provenance", "crosswalk"}
        rows = con.execute("select entity_id, given_name, balance_gbp, visits from merged order by entity_id"
                           ).fetchall()
    con.close()
    assert len(rows) == len(merged)
    assert rows[0] == ("E0", HOSTILE[0], -12.5, 1)  # a database keeps the text as it is: nothing runs it
    assert rows[2][2:] == (None, None) and rows[7][1] is None


def test_duckdb_file_holds_the_three_tables(tmp_path: Path) -> None:
    merged = _outputs(tmp_path / "out")
    path = export_outputs(tmp_path / "out", "duckdb")
    con = duckdb.connect(str(path), read_only=True)
    try:
        assert {r[0] for r in con.execute("select table_name from information_schema.tables").fetchall()} == {
            "merged", "provenance", "crosswalk"}
        back = con.execute("select * from merged order by entity_id").df()
        assert con.execute("select count(*) from crosswalk").fetchone() == (2,)
    finally:
        con.close()
    assert back["given_name"].tolist()[:6] == HOSTILE
    assert back["balance_gbp"].iloc[0] == -12.5 and pd.isna(back["balance_gbp"].iloc[2])
    assert len(back) == len(merged)


def test_a_failed_export_leaves_the_earlier_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    _outputs(tmp_path / "out")
    path = export_outputs(tmp_path / "out", "xlsx")
    before = path.read_bytes()

    def broken(frame: pd.DataFrame) -> pd.DataFrame:
        raise OSError("disk full")

    monkeypatch.setattr(exports, "excel_ready", broken)
    with pytest.raises(OSError, match="disk full"):
        export_outputs(tmp_path / "out", "xlsx")
    assert path.read_bytes() == before
    assert sorted(p.name for p in path.parent.iterdir()) == ["crosswalk.parquet", "merged.parquet", "merged.xlsx",
                                                            "provenance.parquet"]  # no temporary file left


def test_a_table_too_big_for_a_sheet_is_refused_with_a_hint(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                            capsys: pytest.CaptureFixture[str]) -> None:
    _outputs(tmp_path / "out")
    monkeypatch.setattr(exports, "EXCEL_MAX_ROWS", 5)
    assert cli.main(["export", str(tmp_path), "--out", str(tmp_path / "out"), "--format", "xlsx"]) == 2
    err = capsys.readouterr().err
    assert "more than an Excel sheet holds" in err and "sqlite or duckdb" in err
    assert not (tmp_path / "out" / "merged.xlsx").exists()


def test_export_command(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _outputs(tmp_path / "out")
    assert cli.main(["export", str(tmp_path), "--out", str(tmp_path / "out"), "--format", "duckdb",
                     "--to", str(tmp_path / "x.duckdb")]) == 0
    assert "x.duckdb" in capsys.readouterr().out and (tmp_path / "x.duckdb").is_file()
