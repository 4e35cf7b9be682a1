"""``integrate changes --since RUN``: any two stored runs compared, each change with its records."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from integrate import cli
from integrate.history import changes_between
from integrate.state import NewRun, StateStore


def _crosswalk(members: dict[str, list[str]]) -> pd.DataFrame:
    rows = [(key.split(":")[0], key.split(":")[1], entity) for entity, keys in members.items() for key in keys]
    return pd.DataFrame(rows, columns=["source", "record_id", "entity_id"])


OLD = _crosswalk({"E1": ["a:1", "a:2"], "E2": ["b:1"], "E3": ["c:1", "c:2"], "E4": ["d:1"], "E5": ["e:1", "e:2"],
                  "E6": ["f:1", "f:2", "f:3"], "E7": ["g:1"], "E8": ["h:1"]})
NEW = _crosswalk({"E1": ["a:1", "a:2", "a:3"], "E2": ["b:1"], "E3": ["c:1", "x:1"], "E5": ["e:1"], "EN1": ["e:2"],
                  "E6": ["f:1", "f:2"], "E7": ["g:1", "h:1"], "E9": ["z:1"]})


def test_each_kind_of_change_with_the_records_behind_it() -> None:
    table = changes_between(OLD, NEW, old_run=1)
    got = sorted(table[["entity_id", "change", "related_ids", "records_gained", "records_lost"]]
                 .itertuples(index=False, name=None))
    assert got == sorted([
        ("E1", "grew", "E1", "a:3", ""),
        ("E3", "changed", "E3", "x:1", "c:2"),
        ("E4", "retired", "", "", "d:1"),
        ("E5", "split", "E5 EN1", "", "e:2"),  # the old entity: split into E5 and EN1
        ("E5", "split_part", "E5", "", "e:2"),  # the part that keeps the ID
        ("EN1", "split_part", "E5", "e:2", ""),
        ("E6", "shrank", "E6", "", "f:3"),
        ("E7", "merged", "E7 E8", "h:1", ""),  # E8's record joined E7: E8 is named here, not retired
        ("E9", "created", "", "z:1", ""),
    ])
    table = table.set_index("entity_id")
    assert "E2" not in table.index  # unchanged entities are not listed


def test_changes_since_an_earlier_run_from_the_store(tmp_path: Path, state_backend: str,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    store = StateStore.for_workspace(tmp_path)
    first = store.record_run(NewRun(started_at="2026-10-01T00:00:00Z", crosswalk=OLD))
    store.record_run(NewRun(started_at="2026-11-01T00:00:00Z", crosswalk=OLD, summary={"previous_run": first}))
    last = store.record_run(NewRun(started_at="2026-12-01T00:00:00Z", crosswalk=NEW, summary={"previous_run": 2}))
    assert cli.main(["changes", str(tmp_path), "--since", str(first)]) == 0
    out = capsys.readouterr().out
    assert f"Run {last}" in out and f"against run {first}" in out
    for line in ("entities grew", "entities shrank", "entities merged", "entities retired", "records added"):
        assert line in out
    assert "a:3" in out and "f:3" in out
    assert cli.main(["changes", str(tmp_path), "--since", str(last)]) == 2
    assert "is not before run" in capsys.readouterr().err
    assert cli.main(["changes", str(tmp_path), "--since", "99"]) == 2
    assert "run 99 (--since) is not in the state store" in capsys.readouterr().err
