"""``integrate review --terminal``: the same queue and store, driven by lines on standard input."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from integrate.review.store import DecisionStore, load_decisions
from integrate.review.terminal import render_item


def _review(ws: Path, answers: str, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "integrate", "review", str(ws), "--terminal", "--reviewer", "tom",
                           *extra], input=answers, capture_output=True, text=True, timeout=300)


def test_terminal_decides_notes_and_undoes(reviewed_ws: Path) -> None:
    done = _review(reviewed_ws, "n\nsame mobile number\ns\nd\nu\nl\nx\nq\n")
    assert done.returncode == 0, done.stderr
    out = done.stdout
    assert "match probability" in out and "A: " in out and "B: " in out
    assert "saved: same" in out and "saved: different" in out and "undone: different" in out
    assert "please answer s, d, l, u, n or q" in out
    assert "this session: same 1, different 0, defer 1, conflicts 0, undone 1" in out
    stored = load_decisions(reviewed_ws)
    assert stored[["decision", "reviewer", "note"]].fillna("").values.tolist() == [
        ["same", "tom", "same mobile number"], ["defer", "tom", ""]]
    history = DecisionStore.for_workspace(reviewed_ws).history()
    assert history["action"].tolist() == ["decide", "decide", "undo", "decide"]
    # the pair put off is the pair whose 'different' was undone: it was shown again
    undone = history.loc[history["action"] == "undo", "row"].iloc[0]
    deferred = stored[stored["decision"] == "defer"].iloc[0]
    assert f'"record_id_a": "{deferred["record_id_a"]}"' in undone
    assert f'"record_id_b": "{deferred["record_id_b"]}"' in undone


def test_terminal_stops_at_end_of_input_and_filters_by_source(reviewed_ws: Path) -> None:
    done = _review(reviewed_ws, "d\n", "--source", "membership")
    assert done.returncode == 0, done.stderr
    stored = load_decisions(reviewed_ws)
    assert len(stored) == 1 and "membership" in {stored.iloc[0]["source_a"], stored.iloc[0]["source_b"]}


def test_values_cannot_drive_the_terminal() -> None:
    item = {"records": [{"source": "a", "record_id": "1", "as_of": "2026-01-01"},
                        {"source": "b", "record_id": "2\x1b[2J", "as_of": "2026-01-01"}],
            "probability": 0.5, "weight": 1.0, "run_decision": "possible link",
            "fields": [{"name": "given_name", "a": "Ann\x1b]0;owned\x07", "b": "Anne", "grade": "close",
                        "compared": True, "weight": 2.5, "weight_note": "",
                        "a_parts": [("Ann", False), ("\x1b]0;owned\x07", True)],
                        "b_parts": [("Ann", False), ("e", True)]}]}
    text = "\n".join(render_item(item, {"decided": 0, "remaining": 1, "total": 1}))
    assert "\x1b" not in text and "\x07" not in text
    assert "Ann\\x1b]0;owned\\x07" in text and "2\\x1b[2J" in text
