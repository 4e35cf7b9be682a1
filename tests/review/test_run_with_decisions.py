"""Decisions change the next run: constraints, a re-estimated model, and the audited precision.

One run of the demo workspace (a private copy) after decisions taken from the demo's ground
truth: a ``different`` decision splits a wrong merge, a ``same`` decision joins a missed one,
60 decisions of each kind re-estimate the model, and an audit sample checked in the terminal
gives the precision of automatic links in the run report.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pytest

from integrate.review.quality import AUDIT_SEED, draw_audit_sample, wilson_interval
from integrate.review.store import DecisionStore, NewDecision, load_decisions

TRUE_KEYS = ["source", "record_id"]


@dataclass
class Scenario:
    root: Path
    result: object  # RunResult of the run after the decisions
    wrong_merge: tuple[tuple[str, str], tuple[str, str]]
    missed: tuple[tuple[str, str], tuple[str, str]]
    audit_correct: int
    audit_size: int


def _truth_of(root: Path) -> pd.Series:
    truth = pd.read_csv(root / "demo_sources" / "truth" / "crosswalk.csv", dtype=str)
    return truth.set_index(TRUE_KEYS)["entity_id"]


def _with_truth(pairs: pd.DataFrame, truth: pd.Series) -> pd.DataFrame:
    out = pairs.copy()
    out["true_a"] = truth.reindex(pd.MultiIndex.from_frame(out[["source_a", "record_id_a"]])).to_numpy()
    out["true_b"] = truth.reindex(pd.MultiIndex.from_frame(out[["source_b", "record_id_b"]])).to_numpy()
    out["same"] = out["true_a"] == out["true_b"]
    return out


def _decide(store: DecisionStore, row: pd.Series | tuple, decision: str) -> None:
    store.record(NewDecision(source_a=row.source_a, record_id_a=row.record_id_a, source_b=row.source_b,
                             record_id_b=row.record_id_b, decision=decision, reviewer="truth"))


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory, demo_run) -> Scenario:  # noqa: ANN001
    from integrate import run

    source = demo_run.output_dir.parent
    root = tmp_path_factory.mktemp("decided")
    for name in ("mappings", "demo_sources", "out"):
        shutil.copytree(source / name, root / name)
    truth = _truth_of(root)
    pairs = _with_truth(pd.read_parquet(root / "out" / "pairs.parquet"), truth)
    crosswalk = pd.read_csv(root / "out" / "crosswalk.csv", dtype=str)
    entity = crosswalk.set_index(TRUE_KEYS)["entity_id"]
    pairs["entity_a"] = entity.reindex(pd.MultiIndex.from_frame(pairs[["source_a", "record_id_a"]])).to_numpy()
    pairs["entity_b"] = entity.reindex(pd.MultiIndex.from_frame(pairs[["source_b", "record_id_b"]])).to_numpy()
    together = pairs["entity_a"] == pairs["entity_b"]
    wrong = pairs[together & ~pairs["same"]].sort_values("probability").iloc[0]
    missed = pairs[~together & pairs["same"]].sort_values("probability", ascending=False).iloc[0]

    store = DecisionStore.for_workspace(root)
    _decide(store, wrong, "different")
    _decide(store, missed, "same")
    # reviewed possible links, decided by the truth: enough of each kind to re-estimate the model
    chosen = pairs.index.isin([wrong.name, missed.name])
    possible = pairs[(pairs["decision"] == "possible link") & ~chosen]
    for same, decision in ((True, "same"), (False, "different")):
        for row in possible[possible["same"] == same].head(60).itertuples():
            _decide(store, row, decision)
    # a decision about a record that no longer exists is kept but not applied
    store.record(NewDecision(source_a="webshop", record_id_a="W-GONE", source_b="events", record_id_b="1",
                             decision="same", reviewer="truth"))

    # an audit of automatic links, checked in the terminal with answers from the truth
    sample = _with_truth(draw_audit_sample(pd.read_parquet(root / "out" / "pairs.parquet"), 20, AUDIT_SEED), truth)
    answers = "".join("s\n" if same else "d\n" for same in sample["same"])
    done = subprocess.run([sys.executable, "-m", "integrate", "review", str(root), "--audit", "20", "--terminal",
                           "--reviewer", "auditor"], input=answers, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "drew 20 automatic links at random" in done.stdout

    result = run(root)
    return Scenario(root, result, ((wrong.source_a, wrong.record_id_a), (wrong.source_b, wrong.record_id_b)),
                    ((missed.source_a, missed.record_id_a), (missed.source_b, missed.record_id_b)),
                    int(sample["same"].sum()), len(sample))


def _entity(root: Path, key: tuple[str, str]) -> str:
    crosswalk = pd.read_csv(root / "out" / "crosswalk.csv", dtype=str)
    return crosswalk.set_index(TRUE_KEYS).loc[key, "entity_id"]


def test_a_different_decision_splits_a_wrong_merge(scenario: Scenario) -> None:
    a, b = scenario.wrong_merge
    assert _entity(scenario.root, a) != _entity(scenario.root, b)


def test_a_same_decision_joins_a_missed_match(scenario: Scenario) -> None:
    a, b = scenario.missed
    assert _entity(scenario.root, a) == _entity(scenario.root, b)


def test_every_decision_is_applied_while_both_records_exist(scenario: Scenario) -> None:
    review = scenario.result.review
    decisions = load_decisions(scenario.root)
    assert review.not_applied == 1
    assert review.same == (decisions["decision"] == "same").sum() - 1
    assert review.different == (decisions["decision"] == "different").sum()
    crosswalk = pd.read_csv(scenario.root / "out" / "crosswalk.csv", dtype=str).set_index(TRUE_KEYS)["entity_id"]
    decided = decisions[(decisions["record_id_b"] != "W-GONE") & (decisions["decision"] != "defer")]
    ea = crosswalk.reindex(pd.MultiIndex.from_frame(decided[["source_a", "record_id_a"]])).to_numpy()
    eb = crosswalk.reindex(pd.MultiIndex.from_frame(decided[["source_b", "record_id_b"]])).to_numpy()
    same = (decided["decision"] == "same").to_numpy()
    assert (ea[same] == eb[same]).all()
    assert (ea[~same] != eb[~same]).all()


def test_enough_decisions_re_estimate_the_model(scenario: Scenario) -> None:
    review = scenario.result.review
    assert review.relearned
    assert review.labelled_same >= 50 and review.labelled_different >= 50
    table = review.comparison
    assert set(table["model"]) == {"without decisions", "with decisions"}
    assert set(table["threshold"]) == {"link", "review"}
    assert table["precision (estimated)"].between(0, 1).all() and table["recall (estimated)"].between(0, 1).all()
    html = scenario.result.report_path.read_text(encoding="utf-8")
    assert "re-estimated with" in html and "with decisions" in html


def test_audit_precision_is_in_the_report(scenario: Scenario) -> None:
    audit = scenario.result.review.audit
    assert (audit.checked, audit.correct, audit.drawn) == (scenario.audit_size, scenario.audit_correct, 20)
    low, high = wilson_interval(scenario.audit_correct, scenario.audit_size)
    assert (audit.low, audit.high) == (low, high)
    html = scenario.result.report_path.read_text(encoding="utf-8")
    assert f"{scenario.audit_correct} of {scenario.audit_size} correct" in html
    assert f"sample size {scenario.audit_size}" in html and "Wilson" in html
