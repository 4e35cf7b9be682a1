"""Through a whole run: every value a source holds is either in its record or in failures.csv.

A property-based check (hypothesis) on the tiny workspace: a few cells of good rows are replaced by
any text at all. The run either stops with a clean ``InputError`` (too many unreadable
values, for one), or every record arrives and every non-blank mapped cell is either a canonical
value of its record or a row of the failures table naming its row and column. Nothing vanishes.
"""

from __future__ import annotations

import csv
import io
import os

import pandas as pd
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st
from tiny import HEADER, make_workspace, people_rows

from integrate import run
from integrate.errors import InputError, InputErrors

FIELD_OF = {"given": "given_name", "family": "family_name", "email": "email", "born": "birth_date",
            "fee": "fee_gbp"}
GOOD = people_rows(60)
ANY = st.text(st.characters(blacklist_categories=("Cs",)), max_size=14)
# a few cells replaced by any text: more than 5% unreadable in a column stops the run (by design)
EDITS = st.lists(st.tuples(st.integers(0, len(GOOD) - 1), st.integers(1, len(HEADER) - 1), ANY), max_size=10)


@settings(max_examples=15, deadline=None, derandomize=bool(os.environ.get("CI")),  # as in test_reader_properties
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@example(edits=[(0, 1, '\n'), (1, 3, '0')])  # a line end inside a value: rows are lines
@given(edits=EDITS)
def test_every_value_is_in_its_record_or_in_failures(edits: list[tuple[int, int, str]],
                                                      tmp_path_factory: pytest.TempPathFactory) -> None:
    root = make_workspace(tmp_path_factory.mktemp("ws"))
    rows = [list(row) for row in GOOD]
    for row, column, text in edits:
        rows[row][column] = text
    buffer = io.StringIO(newline="")
    csv.writer(buffer).writerows([HEADER, *rows])
    (root / "desk.csv").write_text(buffer.getvalue(), encoding="utf-8", newline="")
    try:
        result = run(root, write=False)
    except (InputError, InputErrors) as exc:
        assert str(exc).strip()
        return
    records = result.records.set_index("_record_id")
    assert sorted(records.index) == [r[0] for r in rows]  # every record arrives
    failed = set(zip(result.failures["row"].astype(int), result.failures["column"]))
    for row in rows:
        line = int(records.at[row[0], "_row"])  # the line the record starts on (a value may hold line ends)
        for column, value in zip(HEADER[1:], row[1:]):
            if not value.strip():
                continue
            kept = not pd.isna(records.at[row[0], FIELD_OF[column]])
            assert kept or (line, column) in failed, (row[0], column, value)
