"""The service's in-memory queue state gives the same items as ``queue_items`` rebuilding them, and
follows decisions written by another store (another process) through the history table."""

from __future__ import annotations

import shutil
from pathlib import Path

from integrate.review.queue import load_review_data, queue_items
from integrate.review.store import KEY_COLUMNS, DecisionStore, NewDecision
from integrate.service.queue_cache import QueueState


def _copy(demo_run, dest: Path) -> Path:  # noqa: ANN001 - demo_run is a RunResult
    source = demo_run.output_dir.parent
    for name in ("mappings", "demo_sources", "out"):
        shutil.copytree(source / name, dest / name)
    return dest


def _rebuilt(data, store, source=None, field=None) -> list[dict]:  # noqa: ANN001
    frame = queue_items(data, store, source=source, field=field)
    return [{**{c: r[c] for c in KEY_COLUMNS}, "probability": float(r["probability"]), "state": r["state"]}
            for r in frame.to_dict("records")]


def test_cached_queue_follows_every_writer(tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    ws = _copy(demo_run, tmp_path / "ws")
    data = load_review_data(ws)
    served = DecisionStore.for_workspace(ws)
    state = QueueState(data, served)
    other = DecisionStore.for_workspace(ws)  # stands for the terminal review or another server
    other.engine.dispose()
    keys = list(data.queue[KEY_COLUMNS].itertuples(index=False, name=None))
    assert len(keys) >= 4, "the demo's queue is too short for this test"
    decided = []
    for key, kind in zip(keys[:4], ["same", "different", "defer", "same"]):
        decided.append(other.record(NewDecision(**dict(zip(KEY_COLUMNS, key)), decision=kind, reviewer="bo")))
    other.undo(int(decided[-1]["id"]), "bo")  # the last one taken back: open again
    other.record(NewDecision(**dict(zip(KEY_COLUMNS, keys[2])), decision="different", reviewer="bo"))  # defer replaced
    source = data.sources[0]
    field = next(iter(data.fields))
    for filters in [(None, None), (source, None), (None, field), (source, field)]:
        progress, items = state.page(*filters, 0, len(keys) + 10)
        expected = _rebuilt(data, served, *filters)
        assert items == expected, filters
        assert progress["total"] == len(expected)
        assert progress["decided"] == sum(e["state"] == "decided" for e in expected)
        assert progress["deferred"] == sum(e["state"] == "deferred" for e in expected)
    _, first = state.page(None, None, 0, 4)
    assert [i["state"] for i in first] == ["decided", "decided", "decided", "open"]
    _, window = state.page(None, None, 1, 2)
    assert window == first[1:3]
