"""Readers: one small real file per format, read back; errors carry file, line and reason."""

from __future__ import annotations

import datetime as dt
import json
import sqlite3
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources import read_source


def _values(frame: pd.DataFrame) -> list[dict[str, object]]:
    """Rows as plain dicts, <NA> as None, for readable comparisons."""
    return [{k: (None if pd.isna(v) else v) for k, v in row.items()} for row in frame.to_dict("records")]


def _check_shape(frame: pd.DataFrame) -> None:
    for column in frame.columns:
        expected = "int64" if column == "_row" else "string"
        assert str(frame[column].dtype) == expected, column


# --- CSV ---------------------------------------------------------------------------------


def test_csv_values_and_physical_lines(tmp_path: Path) -> None:
    (tmp_path / "people.csv").write_text(
        "id,name,note\n"  # line 1
        '1,Ann,"two\nlines"\n'  # lines 2-3: a quoted value spans two lines
        "\n"  # line 4: blank, not a record
        "2,  ,x\n"  # line 5: whitespace-only becomes <NA>
        "3,Bo,\n",  # line 6
        encoding="utf-8",
    )
    frame = read_source(ReadSpec(format="csv", path="people.csv"), tmp_path, name="crm")
    _check_shape(frame)
    assert list(frame.columns) == ["id", "name", "note", "_row"]
    assert _values(frame) == [
        {"id": "1", "name": "Ann", "note": "two\nlines", "_row": 2},
        {"id": "2", "name": None, "note": "x", "_row": 5},
        {"id": "3", "name": "Bo", "note": None, "_row": 6},
    ]


def test_csv_keeps_text_as_written(tmp_path: Path) -> None:
    # leading zeros, "NA" and "null" are data until the mapping says otherwise
    (tmp_path / "p.csv").write_text("id;zip;flag\n007;01234;NA\n8;null;\n", encoding="utf-8")
    frame = read_source(ReadSpec(format="csv", path="p.csv", delimiter=";"), tmp_path, name="crm")
    assert _values(frame) == [
        {"id": "007", "zip": "01234", "flag": "NA", "_row": 2},
        {"id": "8", "zip": "null", "flag": None, "_row": 3},
    ]


def test_csv_other_encoding(tmp_path: Path) -> None:
    (tmp_path / "p.csv").write_bytes("id,name\n1,Zoë\n".encode("cp1252"))
    frame = read_source(ReadSpec(format="csv", path="p.csv", encoding="cp1252"), tmp_path, name="crm")
    assert frame["name"].tolist() == ["Zoë"]


def test_csv_header_only_is_an_empty_frame(tmp_path: Path) -> None:
    (tmp_path / "p.csv").write_text("id,name\n", encoding="utf-8")
    frame = read_source(ReadSpec(format="csv", path="p.csv"), tmp_path, name="crm")
    assert list(frame.columns) == ["id", "name", "_row"]
    assert len(frame) == 0
    _check_shape(frame)


def test_csv_bad_encoding_names_the_line(tmp_path: Path) -> None:
    # 0xE9 is "é" in Latin-1 but an invalid lone byte in UTF-8; it sits on line 3
    (tmp_path / "p.csv").write_bytes(b"id,name\n1,Ann\n2,Ren\xe9\n")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="csv", path="p.csv"), tmp_path, name="crm")
    err = caught.value
    assert (err.file, err.line, err.reason) == ("p.csv", 3, "bad_encoding")
    assert err.hint is not None and "encoding" in err.hint


def test_csv_unknown_encoding(tmp_path: Path) -> None:
    (tmp_path / "p.csv").write_text("id\n1\n", encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="csv", path="p.csv", encoding="klingon"), tmp_path, name="crm")
    assert (caught.value.file, caught.value.reason) == ("p.csv", "unknown_encoding")


def test_csv_row_with_too_many_fields(tmp_path: Path) -> None:
    (tmp_path / "p.csv").write_text("id,name\n1,Ann\n2,Bo,extra\n", encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="csv", path="p.csv"), tmp_path, name="crm")
    assert (caught.value.file, caught.value.line, caught.value.reason) == ("p.csv", 3, "bad_csv")


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="csv", path="exports/nope.csv"), tmp_path, name="crm")
    err = caught.value
    assert (err.file, err.reason) == ("exports/nope.csv", "missing_file")
    assert err.hint is not None and "path" in err.hint


def test_absolute_path(tmp_path: Path) -> None:
    (tmp_path / "p.csv").write_text("id\n1\n", encoding="utf-8")
    frame = read_source(ReadSpec(format="csv", path=str(tmp_path / "p.csv")), Path("/nowhere"), name="crm")
    assert frame["id"].tolist() == ["1"]


# --- Excel -------------------------------------------------------------------------------


def _write_workbook(path: Path) -> None:
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Notes"
    sheet.append(["nothing here"])
    people = book.create_sheet("People")
    people.append(["id", "born", "height", "weight", "seen"])  # row 1
    people.append([1, dt.datetime(1990, 5, 1), 172.5, 45.0, dt.datetime(2024, 3, 1, 14, 30)])  # row 2
    # row 3 stays empty
    people.append([])
    people.append(["A-2", dt.date(2001, 2, 3), 180, None, "  "])  # row 4
    book.save(path)


def test_excel_values_and_sheet_rows(tmp_path: Path) -> None:
    _write_workbook(tmp_path / "hr.xlsx")
    frame = read_source(ReadSpec(format="excel", path="hr.xlsx", sheet="People"), tmp_path, name="hr")
    _check_shape(frame)
    assert _values(frame) == [
        {"id": "1", "born": "1990-05-01", "height": "172.5", "weight": "45", "seen": "2024-03-01T14:30:00",
         "_row": 2},
        {"id": "A-2", "born": "2001-02-03", "height": "180", "weight": None, "seen": None, "_row": 4},
    ]


def test_excel_sheet_by_index_and_default(tmp_path: Path) -> None:
    _write_workbook(tmp_path / "hr.xlsx")
    by_index = read_source(ReadSpec(format="excel", path="hr.xlsx", sheet=1), tmp_path, name="hr")
    assert by_index["id"].tolist() == ["1", "A-2"]
    first = read_source(ReadSpec(format="excel", path="hr.xlsx"), tmp_path, name="hr")
    assert list(first.columns) == ["nothing here", "_row"] and len(first) == 0


def test_excel_missing_sheet_lists_the_sheets(tmp_path: Path) -> None:
    _write_workbook(tmp_path / "hr.xlsx")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="excel", path="hr.xlsx", sheet="Staff"), tmp_path, name="hr")
    err = caught.value
    assert (err.file, err.reason, err.value) == ("hr.xlsx", "missing_sheet", "Staff")
    assert "'Notes'" in err.message and "'People'" in err.message


def test_excel_not_a_workbook(tmp_path: Path) -> None:
    (tmp_path / "hr.xlsx").write_text("id,name\n", encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="excel", path="hr.xlsx"), tmp_path, name="hr")
    assert (caught.value.file, caught.value.reason) == ("hr.xlsx", "bad_file")


# --- JSON --------------------------------------------------------------------------------


def test_json_lines_flattened(tmp_path: Path) -> None:
    (tmp_path / "shop.jsonl").write_text(
        '{"id": 1, "weight": 68.0, "name": {"first": "Ann"}, "tags": ["a", "b"]}\n'  # line 1
        "\n"  # line 2: blank
        '{"id": 12345678901234567, "weight": 68.5, "vip": true, "deposit": {"amount": 10, "currency": "EUR"}}\n',
        encoding="utf-8",
    )
    frame = read_source(ReadSpec(format="jsonl", path="shop.jsonl"), tmp_path, name="shop")
    _check_shape(frame)
    assert _values(frame) == [
        {"id": "1", "weight": "68", "name.first": "Ann", "tags": '["a", "b"]', "vip": None,
         "deposit.amount": None, "deposit.currency": None, "_row": 1},
        # a large integer ID keeps every digit, even though the other record's ID is small
        {"id": "12345678901234567", "weight": "68.5", "name.first": None, "tags": None, "vip": "true",
         "deposit.amount": "10", "deposit.currency": "EUR", "_row": 3},
    ]


def test_json_array_uses_element_index(tmp_path: Path) -> None:
    records = [{"id": "a", "h": 1.5}, {"id": "b", "h": None}, {"id": "c"}]
    (tmp_path / "shop.json").write_text(json.dumps(records, indent=2), encoding="utf-8")
    frame = read_source(ReadSpec(format="json", path="shop.json"), tmp_path, name="shop")
    assert _values(frame) == [
        {"id": "a", "h": "1.5", "_row": 1},
        {"id": "b", "h": None, "_row": 2},
        {"id": "c", "h": None, "_row": 3},
    ]


def test_json_lines_malformed_line(tmp_path: Path) -> None:
    (tmp_path / "shop.jsonl").write_text('{"id": 1}\n\n{"id": 2,}\n{"id": 3}\n', encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="jsonl", path="shop.jsonl"), tmp_path, name="shop")
    err = caught.value
    assert (err.file, err.line, err.reason) == ("shop.jsonl", 3, "bad_json")


def test_json_array_malformed(tmp_path: Path) -> None:
    (tmp_path / "shop.json").write_text('[\n  {"id": 1},\n  {"id": 2\n]\n', encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="json", path="shop.json"), tmp_path, name="shop")
    assert (caught.value.file, caught.value.line, caught.value.reason) == ("shop.json", 4, "bad_json")


def test_json_record_that_is_not_an_object(tmp_path: Path) -> None:
    (tmp_path / "shop.jsonl").write_text('{"id": 1}\n[1, 2]\n', encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="jsonl", path="shop.jsonl"), tmp_path, name="shop")
    assert (caught.value.line, caught.value.reason) == (2, "bad_json")


# --- Parquet -----------------------------------------------------------------------------


def test_parquet_round_trip(tmp_path: Path) -> None:
    original = pd.DataFrame(
        {
            "id": [1, 2, 3],
            "height": [172.0, None, 180.5],
            "name": ["Ann", "", "Cy"],
            "born": [dt.date(1990, 5, 1), None, dt.date(1501, 1, 2)],
        }
    )
    original.to_parquet(tmp_path / "p.parquet")
    frame = read_source(ReadSpec(format="parquet", path="p.parquet"), tmp_path, name="lab")
    _check_shape(frame)
    assert _values(frame) == [
        {"id": "1", "height": "172", "name": "Ann", "born": "1990-05-01", "_row": 1},
        {"id": "2", "height": None, "name": None, "born": None, "_row": 2},
        {"id": "3", "height": "180.5", "name": "Cy", "born": "1501-01-02", "_row": 3},
    ]


# --- SQLite and SQLAlchemy ---------------------------------------------------------------


def _write_database(path: Path) -> None:
    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE people (id INTEGER, height REAL, name TEXT)")
        conn.executemany(
            "INSERT INTO people VALUES (?, ?, ?)", [(1, 172.0, "Ann"), (2, None, "Bo"), (3, 68.5, None)]
        )
        conn.execute("CREATE VIEW tall AS SELECT * FROM people WHERE height > 100")
    conn.close()


def test_sqlite_table(tmp_path: Path) -> None:
    _write_database(tmp_path / "club.db")
    frame = read_source(ReadSpec(format="sqlite", path="club.db", table="people"), tmp_path, name="club")
    _check_shape(frame)
    assert _values(frame) == [
        {"id": "1", "height": "172", "name": "Ann", "_row": 1},
        {"id": "2", "height": None, "name": "Bo", "_row": 2},
        {"id": "3", "height": "68.5", "name": None, "_row": 3},
    ]


def test_sqlite_query_and_view(tmp_path: Path) -> None:
    _write_database(tmp_path / "club.db")
    spec = ReadSpec(format="sqlite", path="club.db", query="SELECT id FROM people WHERE id > 1 ORDER BY id")
    assert read_source(spec, tmp_path, name="club")["id"].tolist() == ["2", "3"]
    view = read_source(ReadSpec(format="sqlite", path="club.db", table="tall"), tmp_path, name="club")
    assert view["id"].tolist() == ["1"]


def test_sqlite_is_opened_read_only(tmp_path: Path) -> None:
    _write_database(tmp_path / "club.db")
    spec = ReadSpec(format="sqlite", path="club.db", query="DELETE FROM people")
    with pytest.raises(SourceError) as caught:
        read_source(spec, tmp_path, name="club")
    assert caught.value.reason == "bad_query"
    with sqlite3.connect(tmp_path / "club.db") as conn:
        assert conn.execute("SELECT count(*) FROM people").fetchone() == (3,)
    conn.close()


def test_sqlite_missing_table_lists_tables(tmp_path: Path) -> None:
    _write_database(tmp_path / "club.db")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="sqlite", path="club.db", table="members"), tmp_path, name="club")
    err = caught.value
    assert (err.file, err.reason, err.value) == ("club.db", "missing_table", "members")
    assert "'people'" in err.message and "'tall'" in err.message


def test_sql_url(tmp_path: Path) -> None:
    _write_database(tmp_path / "club.db")
    spec = ReadSpec(format="sql", url=f"sqlite:///{tmp_path / 'club.db'}", table="people")
    frame = read_source(spec, tmp_path, name="club")
    assert frame["name"].tolist() == ["Ann", "Bo", pd.NA]
    assert frame["_row"].tolist() == [1, 2, 3]


def test_sql_missing_table(tmp_path: Path) -> None:
    _write_database(tmp_path / "club.db")
    spec = ReadSpec(format="sql", url=f"sqlite:///{tmp_path / 'club.db'}", table="members")
    with pytest.raises(SourceError) as caught:
        read_source(spec, tmp_path, name="club")
    assert caught.value.reason == "missing_table"


def test_sql_empty_result_keeps_columns(tmp_path: Path) -> None:
    _write_database(tmp_path / "club.db")
    spec = ReadSpec(format="sqlite", path="club.db", query="SELECT id, name FROM people WHERE id > 99")
    frame = read_source(spec, tmp_path, name="club")
    assert list(frame.columns) == ["id", "name", "_row"] and len(frame) == 0
    _check_shape(frame)
