"""The decision store on a real SQLite file and a real PostgreSQL server (every test runs on both):
conflicts, replacing, undo, history, load_decisions."""

from __future__ import annotations

import random
import threading
from pathlib import Path

import pandas as pd
import pytest

from integrate.review.store import (
    DECISION_COLUMNS,
    DecisionConflict,
    DecisionStore,
    NewDecision,
    NothingToUndo,
    load_decisions,
    state_database,
)

pytestmark = pytest.mark.usefixtures("state_backend")


def _decision(decision: str, reviewer: str, a: str = "1", b: str = "2", **extra: object) -> NewDecision:
    return NewDecision(source_a="shop", record_id_a=a, source_b="club", record_id_b=b, decision=decision,
                       reviewer=reviewer, **extra)


def test_a_decision_is_stored_with_its_scores_and_note(tmp_path: Path, state_backend: str) -> None:
    store = DecisionStore.for_workspace(tmp_path)
    row = store.record(_decision("same", "ana", note="same birthday and e-mail", probability=0.51, weight=3.2,
                                 run_decision="possible link", scores={"grade_email": "exact"}))
    assert state_database(tmp_path).exists() == (state_backend == "sqlite")
    frame = load_decisions(tmp_path)
    assert list(frame.columns) == DECISION_COLUMNS
    assert frame.iloc[0].to_dict() | {"decided_at": None} == {
        # the ends are stored in a fixed order: (club, 2) sorts before (shop, 1)
        "source_a": "club", "record_id_a": "2", "source_b": "shop", "record_id_b": "1", "decision": "same",
        "reviewer": "ana", "decided_at": None, "note": "same birthday and e-mail"}
    assert frame.iloc[0]["decided_at"].endswith("Z")
    full = store.decisions().iloc[0]
    assert (full["probability"], full["weight"], full["run_decision"]) == (0.51, 3.2, "possible link")
    assert '"grade_email": "exact"' in full["scores"]
    assert row["revision"] == 1


def test_another_reviewers_decision_is_a_conflict_not_an_overwrite(tmp_path: Path) -> None:
    store = DecisionStore.for_workspace(tmp_path)
    store.record(_decision("same", "ana"))
    with pytest.raises(DecisionConflict) as caught:
        store.record(_decision("different", "bo"))
    assert caught.value.existing["reviewer"] == "ana"
    assert caught.value.existing["decision"] == "same"
    assert load_decisions(tmp_path)["decision"].tolist() == ["same"]


def test_own_decision_and_anyones_deferral_can_be_replaced(tmp_path: Path) -> None:
    store = DecisionStore.for_workspace(tmp_path)
    store.record(_decision("defer", "ana"))
    row = store.record(_decision("different", "bo"))  # a deferral decides nothing: bo may decide
    assert (row["decision"], row["reviewer"], row["revision"]) == ("different", "bo", 2)
    row = store.record(_decision("same", "bo", note="second look"))  # bo changes their mind
    assert (row["decision"], row["revision"]) == ("same", 3)
    assert len(load_decisions(tmp_path)) == 1
    assert store.history()["action"].tolist() == ["decide", "replace", "replace"]


def test_undo_removes_only_the_reviewers_own_decision(tmp_path: Path) -> None:
    store = DecisionStore.for_workspace(tmp_path)
    mine = store.record(_decision("same", "ana"))
    with pytest.raises(DecisionConflict):
        store.undo(mine["id"], "bo")
    store.undo(mine["id"], "ana")
    assert load_decisions(tmp_path).empty
    with pytest.raises(NothingToUndo):
        store.undo(mine["id"], "ana")
    assert store.history()["action"].tolist() == ["decide", "undo"]  # the undone decision stays in the history


def test_no_database_means_no_decisions(tmp_path: Path) -> None:
    frame = load_decisions(tmp_path / "nowhere")
    assert frame.empty and list(frame.columns) == DECISION_COLUMNS
    assert not (tmp_path / "nowhere").exists()  # reading never creates a database


def test_bad_decision_values_are_refused(tmp_path: Path) -> None:
    from pydantic import ValidationError

    with pytest.raises(ValidationError, match="decision"):
        _decision("maybe", "ana")
    with pytest.raises(ValidationError, match="reviewer"):
        _decision("same", "")


def test_many_threads_deciding_the_same_pairs_store_each_pair_once(tmp_path: Path) -> None:
    """Eight reviewers race over the same 40 pairs: every pair ends with exactly one decision."""
    store = DecisionStore.for_workspace(tmp_path)
    outcomes: dict[str, list[str]] = {f"r{k}": [] for k in range(8)}
    barrier = threading.Barrier(8)

    def work(name: str) -> None:
        barrier.wait()
        for pair in range(40):
            try:
                store.record(_decision("same" if pair % 2 else "different", name, a=str(pair), b=str(pair)))
                outcomes[name].append("stored")
            except DecisionConflict:
                outcomes[name].append("conflict")

    threads = [threading.Thread(target=work, args=(name,)) for name in outcomes]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    frame = load_decisions(tmp_path)
    assert len(frame) == 40 and not frame.duplicated(["source_a", "record_id_a", "source_b", "record_id_b"]).any()
    stored = sum(o.count("stored") for o in outcomes.values())
    conflicts = sum(o.count("conflict") for o in outcomes.values())
    assert stored == 40 and conflicts == 7 * 40
    assert (store.history()["action"] == "decide").sum() == 40


def test_a_cluster_decision_is_stored_whole_or_not_at_all_and_undone_whole(tmp_path: Path) -> None:
    store = DecisionStore.for_workspace(tmp_path)
    store.record(_decision("defer", "bo", a="1", b="3"))  # a deferred pair is replaced
    store.record(_decision("same", "bo", a="1", b="4"))  # a pair already decided alike stays bo's
    parts = {"A": [["shop", "1"]], "B": [["club", "2"], ["club", "3"], ["club", "4"]]}
    group = store.record_cluster("E1", "split", parts, [
        _decision("different", "ana", a="1", b="2"), _decision("different", "ana", a="1", b="3"),
        _decision("same", "ana", a="1", b="4")])
    assert [(r["record_id_a"], r["decision"], r["revision"]) for r in group["decisions"]] == [
        ("2", "different", 1), ("3", "different", 2)]
    assert store.cluster_decisions("E1")[0]["parts"] == parts

    # bo decided 1~5 'same': ana's cluster decision that needs it 'different' stores nothing at all
    store.record(_decision("same", "bo", a="1", b="5"))
    before = store.decisions()
    with pytest.raises(DecisionConflict, match="already decided 'same' by bo"):
        store.record_cluster("E2", "split", {"A": [], "B": []}, [
            _decision("different", "ana", a="1", b="6"), _decision("different", "ana", a="1", b="5")])
    assert store.decisions().equals(before) and [g["cluster_id"] for g in store.cluster_decisions()] == ["E1"]

    # undoing any one pair of it (as the service does) finds the cluster decision; undo removes its pairs only
    assert store.cluster_decision_of(int(group["decisions"][1]["id"])) == group["id"]
    with pytest.raises(DecisionConflict):
        store.undo_cluster(group["id"], "bo")
    undone = store.undo_cluster(group["id"], "ana")
    assert len(undone["decisions"]) == 2 and store.cluster_decisions() == []
    left = store.decisions()
    assert sorted(zip(left["record_id_a"], left["decision"])) == [("4", "same"), ("5", "same")]
    assert list(store.history()["action"]).count("undo") == 2
    with pytest.raises(NothingToUndo):
        store.undo_cluster(group["id"], "ana")


def _random_decisions(seed: int, n: int, b: str) -> list[NewDecision]:
    """Decisions of three reviewers on four pairs, drawn so that new pairs, replacements, deferrals and
    conflicts all occur (seeded, so a failure can be replayed)."""
    rng = random.Random(seed)
    return [_decision(rng.choice(["same", "different", "defer"]), rng.choice(["ana", "bo", "cy"]),
                      a=str(rng.randrange(4)), b=b) for _ in range(n)]


def _outcome(answer: object) -> tuple[str, ...]:
    if isinstance(answer, DecisionConflict):
        return ("conflict", answer.existing["reviewer"], answer.existing["decision"])
    assert isinstance(answer, dict)
    return ("stored", answer["reviewer"], answer["decision"], str(answer["revision"]))


@pytest.mark.parametrize("seed", range(6))
def test_decisions_stored_in_batches_end_as_they_would_one_at_a_time(tmp_path: Path, seed: int,
                                                                     state_backend: str) -> None:
    """``record_many`` (one transaction, the service's group commit) gives each decision the answer
    ``record`` gives it, and leaves the same decisions and history, whatever the batch sizes."""
    # two workspaces; on PostgreSQL both use the one database, so each has pairs of its own (b = x / y)
    single = DecisionStore.for_workspace(tmp_path / "single")
    expected = []
    for new in _random_decisions(seed, 60, "x"):
        try:
            expected.append(_outcome(single.record(new)))
        except DecisionConflict as conflict:
            expected.append(_outcome(conflict))
    batched = DecisionStore.for_workspace(tmp_path / "batched")
    news = _random_decisions(seed, 60, "y")
    rng, got, at = random.Random(seed + 100), [], 0
    while at < len(news):
        size = rng.randint(1, 9)
        got += [_outcome(a) for a in batched.record_many(news[at:at + size])]
        at += size
    assert got == expected
    assert {"conflict", "stored"} <= {g[0] for g in got}  # the draw exercised both answers
    keep = ["record_id_b", "decision", "reviewer", "revision"]

    def mine(frame: pd.DataFrame, b: str) -> pd.DataFrame:  # stored ends are ordered: (club, b) comes first
        if "record_id_a" in frame:
            ends = frame["record_id_a"]
        else:  # a history row holds the decision as JSON
            ends = frame["row"].str.extract(r'"record_id_a": "(\w+)"')[0]
        return frame[(ends == b).to_numpy()].reset_index(drop=True)

    assert mine(batched.decisions(), "y")[keep].equals(mine(single.decisions(), "x")[keep])
    assert mine(batched.history(), "y")["action"].tolist() == mine(single.history(), "x")["action"].tolist()
    if state_backend == "sqlite":  # two databases of their own: a batch gives the ids single INSERTs would
        assert batched.decisions()["id"].tolist() == single.decisions()["id"].tolist()
        assert batched.history()["decision_id"].tolist() == single.history()["decision_id"].tolist()


def test_the_writer_thread_answers_every_decision_once_and_stores_each_pair_once(tmp_path: Path) -> None:
    """Eight threads hand 40 decisions each to the service's decision writer: every future is answered
    (a stored row or a conflict), each pair is stored once, and the answers agree with the store."""
    from integrate.service.decision_writer import DecisionWriter

    store = DecisionStore.for_workspace(tmp_path)
    writer = DecisionWriter(store)
    barrier = threading.Barrier(8)
    answers: dict[str, list[str]] = {}

    def work(name: str) -> None:
        barrier.wait()
        futures = [writer.submit(_decision("same", name, a=str(pair), b=str(pair))) for pair in range(40)]
        outcome = []
        for future in futures:
            try:
                outcome.append(future.result(timeout=60)["reviewer"])
            except DecisionConflict as conflict:
                outcome.append("conflict:" + conflict.existing["reviewer"])
        answers[name] = outcome

    threads = [threading.Thread(target=work, args=(f"r{k}",)) for k in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    frame = store.decisions()
    assert len(frame) == 40
    owner = dict(zip(frame["record_id_a"], frame["reviewer"]))
    for name, outcome in answers.items():
        for pair, said in enumerate(outcome):
            # the one who got the pair was told so; everyone else was told who had it
            assert said == (name if owner[str(pair)] == name else "conflict:" + owner[str(pair)])
    assert (store.history()["action"] == "decide").sum() == 40
