"""A whole run with its state store on a real PostgreSQL server: recorded, and stable on a second run."""

from __future__ import annotations

from pathlib import Path

import pytest

from integrate import cli, run
from integrate.state import STATE_URL_ENV, StateStore, state_database


def test_two_runs_on_postgresql_keep_every_entity_id(workspace: Path, postgres_url: str,
                                                     monkeypatch: pytest.MonkeyPatch,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setenv(STATE_URL_ENV, postgres_url)
    first = run(workspace)
    second = run(workspace)
    assert not state_database(workspace).exists()  # nothing went to the default SQLite file
    store = StateStore.for_workspace(workspace)
    assert [r.run_id for r in store.runs()] == [first.run_id, second.run_id]
    stored = store.crosswalk(second.run_id)
    assert len(stored) == len(second.crosswalk) == len(first.crosswalk)
    keys = ["source", "record_id"]
    a = first.crosswalk.set_index(keys)["entity_id"].sort_index()
    b = second.crosswalk.set_index(keys)["entity_id"].sort_index()
    assert a.equals(b)  # same inputs: the same ID for every record
    assert set(stored["entity_id"]) == set(b)
    assert second.changes.as_dict()["created"] == 0
    assert cli.main(["changes", str(workspace)]) == 0
    assert f"Run {second.run_id}" in capsys.readouterr().out
