"""``integrate review --export`` / ``--import``: decisions move between workspaces as CSV."""

from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd
import pytest

from integrate.cli import main
from integrate.review.store import DecisionStore, NewDecision, load_decisions


def _decide(ws: Path, a: str, b: str, decision: str, reviewer: str = "ana", note: str | None = None) -> None:
    DecisionStore.for_workspace(ws).record(NewDecision(source_a="membership", record_id_a=a, source_b="webshop",
                                                       record_id_b=b, decision=decision, reviewer=reviewer,
                                                       note=note, probability=0.42))


def test_export_then_import_into_another_workspace(reviewed_ws: Path, tmp_path: Path,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    other = tmp_path / "other"
    shutil.copytree(reviewed_ws / "mappings", other / "mappings")
    _decide(reviewed_ws, "M-1", "W1", "same", note='quoted "note", with comma')
    _decide(reviewed_ws, "M-2", "W2", "different")
    _decide(reviewed_ws, "M-3", "W3", "defer")
    exported = tmp_path / "decisions.csv"
    assert main(["review", str(reviewed_ws), "--export", str(exported)]) == 0
    assert "wrote 3 decisions" in capsys.readouterr().out
    frame = pd.read_csv(exported, dtype=str)
    assert list(frame.columns[:8]) == ["source_a", "record_id_a", "source_b", "record_id_b", "decision", "reviewer",
                                       "decided_at", "note"]

    _decide(other, "M-2", "W2", "same", reviewer="bo")  # the other workspace already decided one pair otherwise
    assert main(["review", str(other), "--import", str(exported)]) == 1  # a conflict is not an overwrite
    out = capsys.readouterr().out
    assert "added 2 decisions, 0 already there, 1 conflicts" in out
    assert "here 'same' by bo, file 'different' by ana (kept 'same')" in out
    moved = load_decisions(other).set_index("record_id_a")
    assert moved.loc["M-1", "note"] == 'quoted "note", with comma'
    assert moved.loc["M-1", "decided_at"] == frame.set_index("record_id_a").loc["M-1", "decided_at"]
    assert moved.loc["M-2", "reviewer"] == "bo"

    assert main(["review", str(other), "--import", str(exported)]) == 1
    assert "added 0 decisions, 2 already there, 1 conflicts" in capsys.readouterr().out
    assert len(load_decisions(other)) == 3


def test_a_bad_decisions_file_names_the_line(reviewed_ws: Path, tmp_path: Path,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    bad = tmp_path / "bad.csv"
    bad.write_text("source_a,record_id_a,source_b,record_id_b,decision,reviewer\n"
                   "membership,M-1,webshop,W1,same,ana\n"
                   "membership,M-2,webshop,W2,perhaps,ana\n"
                   "membership,,webshop,W3,same,ana\n", encoding="utf-8")
    assert main(["review", str(reviewed_ws), "--import", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f"{bad}:3 column 'decision': unknown decision 'perhaps'" in err
    assert f"{bad}:4 column 'record_id_a': empty value" in err
    assert load_decisions(reviewed_ws).empty  # nothing is imported from a file with errors

    missing = tmp_path / "missing.csv"
    missing.write_text("source_a,decision\nmembership,same\n", encoding="utf-8")
    assert main(["review", str(reviewed_ws), "--import", str(missing)]) == 2
    assert "missing columns" in capsys.readouterr().err


def test_review_needs_a_finished_run(tmp_path: Path, reviewed_ws: Path, capsys: pytest.CaptureFixture[str]) -> None:
    fresh = tmp_path / "fresh"
    shutil.copytree(reviewed_ws / "mappings", fresh / "mappings")
    assert main(["review", str(fresh), "--terminal"]) == 2
    assert "run 'integrate run' on this workspace first" in capsys.readouterr().err
    assert main(["review", str(reviewed_ws), "--audit", "0", "--terminal"]) == 2
    assert "--audit needs a positive number" in capsys.readouterr().err
