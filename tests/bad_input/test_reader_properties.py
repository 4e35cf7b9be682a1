"""Property-based checks of every reader and of the mapping-file loader (hypothesis).

Two properties, each over every file format the tool reads:

- **Nothing lost**: a table written by the format's reference library (Python's ``csv`` and
  ``json`` and ``sqlite3`` modules, openpyxl, pyarrow) reads back with every cell's text as
  written, blank cells as empty, one record per row. The reference libraries are the oracle.
- **Bad bytes give a clean error**: a valid file with bytes flipped, cut short or spliced is
  either read or refused with an ``InputError`` (exit 2 in the CLI); never another exception.
  The same for a mapping file with its text mutated.

``benchmarks/fuzz.py`` runs the hand-written hostile cases; these let hypothesis search.
"""

from __future__ import annotations

import csv
import io
import json
import os
import sqlite3
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from openpyxl import Workbook

from integrate.errors import InputError, InputErrors
from integrate.mapping.load import load_canonical, load_source_mapping
from integrate.mapping.spec import ReadSpec
from integrate.sources import read_source

from .tiny import CANONICAL, SOURCE_MAPPING

# in CI the same examples on every machine, so it does not turn red by chance; elsewhere a fresh
# search each run (hypothesis keeps what it finds and tries it first next time)
SETTINGS = settings(max_examples=40, deadline=None, derandomize=bool(os.environ.get("CI")),
                    suppress_health_check=[HealthCheck.function_scoped_fixture])
# '_row' is kept for row numbers: a source column of that name is refused (tested below)
NAMES = st.lists(st.text("abcdefghijklmnopqrstuvwxyz_", min_size=1, max_size=8).filter(lambda n: n != "_row"),
                 min_size=1, max_size=5, unique=True)
# any text but lone surrogates (no file format can hold them)
ANY_TEXT = st.text(st.characters(blacklist_categories=("Cs",)), max_size=30)
# what a workbook cell can hold: XML 1.0 characters, and no carriage return (XML readers turn it
# into a line feed, as the standard says)
XLSX_TEXT = st.text(st.characters(blacklist_categories=("Cs", "Cc"), blacklist_characters="\ufffe\uffff"),
                    max_size=30)


def _tables(cell: st.SearchStrategy[str]) -> st.SearchStrategy[tuple[list[str], list[list[str]]]]:
    """A header and 1-6 rows; the first column is a record ID that is never blank."""
    def rows(names: list[str]) -> st.SearchStrategy[tuple[list[str], list[list[str]]]]:
        row = st.tuples(st.from_regex(r"r[0-9]{1,4}", fullmatch=True),
                        *[cell for _ in names[1:]]).map(list)
        return st.lists(row, min_size=1, max_size=6).map(lambda r: (names, r))
    return NAMES.flatmap(rows)


def _expected(names: list[str], rows: list[list[str]]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=names, dtype="string")
    return frame.mask(frame.apply(lambda c: c.str.strip().eq("")))


def _check_read(frame: pd.DataFrame, names: list[str], rows: list[list[str]]) -> None:
    got = frame[names].reset_index(drop=True)
    pd.testing.assert_frame_equal(got, _expected(names, rows), check_dtype=False)


def _write(tmp: Path, kind: str, names: list[str], rows: list[list[str]]) -> ReadSpec:
    if kind == "csv":
        buffer = io.StringIO(newline="")
        writer = csv.writer(buffer)  # RFC 4180 line ends (CRLF): a value holding CR or LF is quoted
        writer.writerow(names)
        writer.writerows(rows)
        (tmp / "t.csv").write_text(buffer.getvalue(), encoding="utf-8", newline="")
        return ReadSpec(format="csv", path="t.csv")
    if kind == "jsonl":
        lines = [json.dumps(dict(zip(names, r)), ensure_ascii=False) for r in rows]
        (tmp / "t.jsonl").write_text("\n".join(lines) + "\n", encoding="utf-8")
        return ReadSpec(format="jsonl", path="t.jsonl")
    if kind == "json":
        (tmp / "t.json").write_text(json.dumps([dict(zip(names, r)) for r in rows]), encoding="utf-8")
        return ReadSpec(format="json", path="t.json")
    if kind == "parquet":
        pq.write_table(pa.table({n: [r[k] for r in rows] for k, n in enumerate(names)}), tmp / "t.parquet")
        return ReadSpec(format="parquet", path="t.parquet")
    if kind == "sqlite":
        with sqlite3.connect(tmp / "t.sqlite") as db:
            columns = ", ".join('"' + n + '" TEXT' for n in names)
            db.execute(f"CREATE TABLE t ({columns})")
            db.executemany(f"INSERT INTO t VALUES ({', '.join('?' for _ in names)})", rows)
        db.close()
        return ReadSpec(format="sqlite", path="t.sqlite", table="t")
    book = Workbook()
    sheet = book.active
    sheet.append(names)
    for r, row in enumerate(rows, start=2):
        for c, value in enumerate(row, start=1):
            cell = sheet.cell(row=r, column=c)
            cell.value = value
            cell.data_type = "s"  # text as text, even when it starts with '='
    book.save(tmp / "t.xlsx")
    return ReadSpec(format="excel", path="t.xlsx")


@pytest.mark.parametrize("kind", ["csv", "jsonl", "json", "parquet", "sqlite"])
@SETTINGS
@given(table=_tables(ANY_TEXT))
def test_every_cell_reads_back_as_written(kind: str, table: tuple[list[str], list[list[str]]],
                                          tmp_path_factory: pytest.TempPathFactory) -> None:
    names, rows = table
    folder = tmp_path_factory.mktemp(kind)
    spec = _write(folder, kind, names, rows)
    _check_read(read_source(spec, folder, name="desk"), names, rows)


@SETTINGS
@given(table=_tables(XLSX_TEXT))
def test_every_workbook_cell_reads_back_as_written(table: tuple[list[str], list[list[str]]],
                                                   tmp_path_factory: pytest.TempPathFactory) -> None:
    names, rows = table
    folder = tmp_path_factory.mktemp("xlsx")
    spec = _write(folder, "excel", names, rows)
    _check_read(read_source(spec, folder, name="desk"), names, rows)


MUTATION = st.lists(st.tuples(st.sampled_from(["flip", "cut", "splice"]), st.floats(0, 1),
                              st.binary(min_size=1, max_size=4)), min_size=1, max_size=4)


def _mutate(data: bytes, steps: list[tuple[str, float, bytes]]) -> bytes:
    for how, where, piece in steps:
        at = int(where * max(len(data) - 1, 0))
        if how == "flip" and data:
            data = data[:at] + bytes([data[at] ^ piece[0] or 1]) + data[at + 1:]
        elif how == "cut":
            data = data[:at]
        else:
            data = data[:at] + piece + data[at:]
    return data


SAMPLE = (["id", "given", "family"], [["r1", "Ana", "Marsh"], ["r2", "Bram, Jr", "Reed"], ["r3", "", "Holt"]])


@pytest.mark.parametrize("kind", ["csv", "jsonl", "json", "parquet", "sqlite", "excel"])
@SETTINGS
@given(steps=MUTATION)
def test_damaged_files_are_read_or_refused_cleanly(kind: str, steps: list[tuple[str, float, bytes]],
                                                   tmp_path_factory: pytest.TempPathFactory) -> None:
    folder = tmp_path_factory.mktemp(kind)
    spec = _write(folder, kind, *SAMPLE)
    path = folder / str(spec.path)
    path.write_bytes(_mutate(path.read_bytes(), steps))
    try:
        frame = read_source(spec, folder, name="desk")
    except (InputError, InputErrors) as exc:
        assert str(exc).strip()  # a message to show, and a reason code
        assert all(e.reason for e in (exc.errors if isinstance(exc, InputErrors) else [exc]))
    else:
        assert isinstance(frame, pd.DataFrame)


@SETTINGS
@given(steps=MUTATION)
def test_damaged_mapping_files_are_loaded_or_refused_cleanly(steps: list[tuple[str, float, bytes]],
                                                            tmp_path_factory: pytest.TempPathFactory) -> None:
    folder = tmp_path_factory.mktemp("mapping")
    (folder / "mappings").mkdir()
    (folder / "mappings" / "canonical.yaml").write_text(CANONICAL, encoding="utf-8")
    text = SOURCE_MAPPING.format(name="desk", read="{format: csv, path: desk.csv}").encode()
    path = folder / "mappings" / "desk.yaml"
    path.write_bytes(_mutate(text, steps))
    canonical = load_canonical(folder / "mappings" / "canonical.yaml")
    try:
        load_source_mapping(path, canonical, "mappings/desk.yaml")
    except (InputError, InputErrors) as exc:
        assert str(exc).strip()


def test_a_source_column_named_like_the_row_numbers_is_refused_with_a_hint(tmp_path: Path) -> None:
    # found by the property test above in CI (hypothesis drew a column called '_row')
    (tmp_path / "t.csv").write_text("_row,name\n1,Ada\n", encoding="utf-8")
    with pytest.raises(InputError) as caught:
        read_source(ReadSpec(format="csv", path="t.csv"), tmp_path, name="desk")
    assert "'_row'" in str(caught.value) and "rename" in (caught.value.hint or "")
