"""The column-at-a-time CSV and Parquet writers give the same bytes and tables as pandas does.

pandas' ``to_csv`` (through Python's csv module) and ``to_parquet`` (through ``Table.from_pandas``)
are the reference: every case compares against them, not against a stored expectation.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.outputs.cells import neutralise_frame
from integrate.outputs.csv_text import text_columns, write_text_columns
from integrate.outputs.tables import _parquet_ready, parquet_table, with_fixed_decimals, write_csv

CELL_TEXT = st.text(st.sampled_from(list('ab ,"\n\t\'=+-@;\x00é١२') + ["\u2028", "\x85", "😀"]), max_size=6)


def _fast_bytes(frame: pd.DataFrame) -> bytes | None:
    columns = text_columns(frame)
    if columns is None:
        return None
    buffer = io.BytesIO()
    write_text_columns(frame.columns, list(columns.values()), buffer)
    return buffer.getvalue()


def _pandas_bytes(frame: pd.DataFrame, **options: object) -> bytes:
    return frame.to_csv(index=False, **options).encode("utf-8")


def test_cells_are_quoted_where_the_csv_module_quotes_them() -> None:
    frame = pd.DataFrame({"text": ["plain", "a,b", 'say "hi"', "two\nlines", "", None, "tab\there", "é ١"],
                          "n": range(8)})
    assert _fast_bytes(frame) == _pandas_bytes(frame)
    assert b'"a,b"' in _fast_bytes(frame) and b'"say ""hi"""' in _fast_bytes(frame)


def test_numbers_and_booleans_are_printed_as_pandas_prints_them() -> None:
    frame = pd.DataFrame({
        "float": [1.0, 1e16, 1e-05, 0.1 + 0.2, -0.0, math.inf, -math.inf, None],
        "float32": np.array([0.1, 2.5, 3, 1e-8, np.nan, 7, 8, 9], dtype=np.float32),
        "int": [0, -1, 2**62, 3, 4, 5, 6, 7],
        "uint8": np.arange(8, dtype=np.uint8),
        "bool": [True, False] * 4,
        "text": pd.array(["x", None, "y", "z", "", "w", "v", "u"], dtype="string"),
    })
    assert _fast_bytes(frame) == _pandas_bytes(frame)


def test_header_names_are_quoted_like_cells() -> None:
    frame = pd.DataFrame({"a,b": ["1"], 'say "x"': ["2"], "plain": ["3"]})
    assert _fast_bytes(frame) == _pandas_bytes(frame)


def test_an_empty_frame_is_its_header_line() -> None:
    frame = pd.DataFrame({"a": pd.Series([], dtype=object), "b": pd.Series([], dtype=float)})
    assert _fast_bytes(frame) == _pandas_bytes(frame) == b"a,b\n"


def test_columns_it_does_not_render_are_left_to_pandas() -> None:
    assert text_columns(pd.DataFrame({"only": ["x", ""]})) is None  # csv writes a lone empty cell as ""
    assert text_columns(pd.DataFrame({"mixed": ["x", 1], "b": ["y", "z"]})) is None
    assert text_columns(pd.DataFrame({"c": pd.Categorical(["x", "y"]), "b": ["y", "z"]})) is None
    assert text_columns(pd.DataFrame({"d": pd.to_datetime(["2026-01-01", None]), "b": ["y", "z"]})) is None
    assert text_columns(pd.DataFrame({"i": pd.array([1, None], dtype="Int64"), "b": ["y", "z"]})) is None


def test_more_rows_than_one_block_join_up(monkeypatch) -> None:  # noqa: ANN001
    import integrate.outputs.csv_text as csv_text

    monkeypatch.setattr(csv_text, "ROWS_PER_BLOCK", 3)
    frame = pd.DataFrame({"a": [f"v{i}," for i in range(10)], "b": np.arange(10) / 3})
    assert _fast_bytes(frame) == _pandas_bytes(frame)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.one_of(st.none(), CELL_TEXT), st.one_of(st.none(), st.floats(allow_nan=True)),
                          st.integers(-(2**63), 2**63 - 1), st.booleans()), max_size=12))
def test_any_frame_of_handled_types_gives_the_bytes_of_to_csv(rows: list[tuple]) -> None:
    frame = pd.DataFrame(rows, columns=["text", "number", "count", "flag"]).astype(
        {"text": object, "number": float, "count": np.int64, "flag": bool})
    if frame["text"].map(lambda v: isinstance(v, str) and "\r" in v).any():
        return  # a carriage return makes write_csv quote every cell with pandas (its own test below)
    assert _fast_bytes(frame) == _pandas_bytes(frame)


def _reference_csv(frame: pd.DataFrame) -> bytes:
    """What write_csv wrote before it made the text itself: pandas on the neutralised frame."""
    safe = neutralise_frame(with_fixed_decimals(frame))
    has_cr = any(isinstance(v, str) and "\r" in v for c in safe.columns for v in safe[c])
    return _pandas_bytes(safe, quoting=csv.QUOTE_ALL) if has_cr else _pandas_bytes(safe)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.one_of(st.none(), CELL_TEXT | st.sampled_from(["-12.50", "+4471", "=1", "\r=1", "-١٢"])),
                          st.one_of(st.none(), st.floats(-1e6, 1e6))), min_size=1, max_size=10))
def test_write_csv_matches_pandas_on_the_neutralised_frame(tmp_path_factory, rows: list[tuple]) -> None:  # noqa: ANN001
    frame = pd.DataFrame(rows, columns=["text", "amount_gbp"]).astype({"text": object, "amount_gbp": float})
    frame.attrs["decimals"] = {"amount_gbp": 2}
    path = tmp_path_factory.mktemp("csv") / "t.csv"
    write_csv(frame, path)
    assert path.read_bytes() == _reference_csv(frame)


def _reference_table(frame: pd.DataFrame) -> pa.Table:
    import json

    table = pa.Table.from_pandas(_parquet_ready(frame), preserve_index=False)
    if frame.attrs:
        table = table.replace_schema_metadata({**table.schema.metadata, "PANDAS_ATTRS": json.dumps(frame.attrs)})
    return table


def test_the_parquet_table_is_the_one_pandas_makes(tmp_path: Path) -> None:
    import datetime as dt

    frame = pd.DataFrame({
        "text": ["a", None, "c", ""],
        "empty": pd.Series([None, None, None, None], dtype=object),
        "string": pd.array(["x", None, "z", "w"], dtype="string"),
        "dates": [dt.date(2026, 1, 1), None, dt.date(2026, 1, 3), dt.date(2026, 1, 4)],  # object, not text
        "grade": pd.Categorical(["same", "missing", "same", "close"]),
        "weight": np.array([1.5, -2, 0, np.nan], dtype=np.float32),
        "count": [1, 2, 3, 4],
        "flag": [True, False, True, True],
        "nullable": pd.array([1, None, 3, 4], dtype="Int64"),
    })
    frame.attrs["decimals"] = {"weight": 2}
    table = parquet_table(frame)
    assert table.equals(_reference_table(frame), check_metadata=True)
    pq.write_table(table, tmp_path / "new.parquet", compression="snappy")
    _parquet_ready(frame).to_parquet(tmp_path / "old.parquet", index=False)
    assert (tmp_path / "new.parquet").read_bytes() == (tmp_path / "old.parquet").read_bytes()
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "new.parquet"), pd.read_parquet(tmp_path / "old.parquet"))


@settings(max_examples=100, deadline=None)
@given(st.lists(st.tuples(st.one_of(st.none(), CELL_TEXT), st.one_of(st.none(), st.integers(), CELL_TEXT)),
                max_size=10))
def test_any_text_or_mixed_column_goes_to_parquet_as_pandas_sends_it(rows: list[tuple]) -> None:
    frame = pd.DataFrame(rows, columns=["text", "mixed"]).astype(object)
    assert parquet_table(frame).equals(_reference_table(frame), check_metadata=True)
