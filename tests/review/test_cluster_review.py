"""A suspicious cluster reviewed as a whole through the service (real uvicorn, the httpx Client), and
the next run honouring the decisions: "split" gives two entities, part A and part B, "keep together"
one, and an undone decision leaves the cluster as the run made it."""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pytest

from integrate.client import Client, ServiceError
from integrate.review.queue import load_review_data
from integrate.review.store import DecisionStore

from .conftest import free_port, serving

WS = "ws"


@dataclass
class Decided:
    root: Path
    split: dict  # the cluster decided "split as proposed" (as GET .../clusters/{id} showed it)
    kept: dict  # the cut of the run decided "keep together"
    undone: dict  # decided "split", then undone through the undo of one of its pairs
    before: pd.Series  # the crosswalk before the decisions: (source, record_id) -> entity
    after: pd.Series  # ... and after the next run


def _crosswalk(root: Path) -> pd.Series:
    frame = pd.read_csv(root / "out" / "crosswalk.csv", dtype=str)
    return frame.set_index(["source", "record_id"])["entity_id"]


def _records(cluster: dict, part: str | None = None) -> list[tuple[str, str]]:
    return [(r["source"], r["record_id"]) for r in cluster["records"] if part is None or r["part"] == part]


@pytest.fixture(scope="module")
def decided(tmp_path_factory: pytest.TempPathFactory, demo_run) -> Decided:  # noqa: ANN001
    from integrate.service.app import create_app
    from integrate.service.store import TokenStore

    source = demo_run.output_dir.parent
    root = tmp_path_factory.mktemp("clusters") / WS
    for name in ("mappings", "demo_sources", "out"):
        shutil.copytree(source / name, root / name)
    tokens = TokenStore.for_workspace(root)
    ana = str(tokens.create("ana", "admin").secret)
    bo = str(tokens.create("bo", "reviewer").secret)
    cases = load_review_data(root).cases
    doubtful = sorted((c for c in cases.values() if c.proposal == "weakest link" and len(c.members) >= 3),
                      key=lambda c: (-len(c.members), c.cluster_id))
    cut = sorted((c for c in cases.values() if c.proposal == "run cut"), key=lambda c: c.cluster_id)
    port = free_port()
    app = create_app([root], port=port)
    with serving(app, port) as base, Client(base, ana) as api, Client(base, bo) as other:
        listed = api.queue(WS, limit=1000)
        assert listed["weakest_links"] == len(cases)
        queued = {e["cluster_id"] for e in listed["items"] if e["cluster_id"]}
        assert queued <= set(cases)
        split = api.cluster(WS, doubtful[0].cluster_id)
        kept = api.cluster(WS, cut[0].cluster_id)
        undone = api.cluster(WS, doubtful[1].cluster_id)

        stored = api.decide_cluster(WS, split["cluster_id"], "split", note="two people, one address")
        assert stored["choice"] == "split" and stored["reviewer"] == "ana"
        assert {tuple(r) for r in stored["parts"]["A"]} == set(_records(split, "A"))
        anchor = tuple(split["anchor"].values())
        assert [d["decision"] for d in stored["decisions"] if tuple(d[c] for c in anchor_keys()) == anchor] == \
            ["different"]

        # another reviewer cannot undo it, nor decide the same cluster otherwise: nothing of theirs is stored
        with pytest.raises(ServiceError) as conflict:
            other.decide_cluster(WS, split["cluster_id"], "keep together")
        assert conflict.value.status == 409 and conflict.value.body["existing"]["reviewer"] == "ana"
        with pytest.raises(ServiceError) as not_theirs:
            other.undo_cluster(WS, stored["id"])
        assert not_theirs.value.status == 409
        assert not (DecisionStore.for_workspace(root).decisions()["reviewer"] == "bo").any()

        api.decide_cluster(WS, kept["cluster_id"], "keep together")
        again = api.decide_cluster(WS, undone["cluster_id"], "split")
        one_pair = again["decisions"][0]["id"]
        back = api.undo(WS, one_pair)  # undoing one of its pairs undoes the whole cluster decision
        assert back["cluster_decision"]["id"] == again["id"]
        assert len(back["cluster_decision"]["decisions"]) == len(again["decisions"])
        shown = api.cluster(WS, split["cluster_id"])
        assert shown["decision"]["choice"] == "split"
        assert all(p["decision"] is not None for p in shown["pairs"] if p["proposed_cut"])

        before = _crosswalk(root)
        job = api.run(WS, wait=True)
        assert job["state"] == "succeeded", job
        for ctx in app.state.contexts.values():
            ctx.jobs.stop_all()
    return Decided(root, split, kept, undone, before, _crosswalk(root))


def anchor_keys() -> list[str]:
    return ["source_a", "record_id_a", "source_b", "record_id_b"]


def test_split_as_proposed_gives_two_entities_next_run(decided: Decided) -> None:
    part_a = {decided.after[r] for r in _records(decided.split, "A")}
    part_b = {decided.after[r] for r in _records(decided.split, "B")}
    assert len(part_a) == 1 and len(part_b) == 1 and part_a != part_b
    assert len({decided.before[r] for r in _records(decided.split)}) == 1  # one entity before


def test_keep_together_gives_one_entity_next_run(decided: Decided) -> None:
    assert len({decided.before[r] for r in _records(decided.kept)}) == 2  # the run had cut it in two
    assert len({decided.after[r] for r in _records(decided.kept)}) == 1


def test_an_undone_cluster_decision_leaves_the_cluster_as_it_was(decided: Decided) -> None:
    members = _records(decided.undone)
    assert len({decided.after[r] for r in members}) == 1
    stored = DecisionStore.for_workspace(decided.root).decisions()
    ends = set(zip(stored["source_a"], stored["record_id_a"])) | set(zip(stored["source_b"], stored["record_id_b"]))
    assert not ends & set(members)
    assert [g["cluster_id"] for g in DecisionStore.for_workspace(decided.root).cluster_decisions()] == sorted(
        [decided.split["cluster_id"], decided.kept["cluster_id"]], key=lambda c: c != decided.split["cluster_id"])


def test_the_cluster_shows_every_record_and_field_with_its_part(decided: Decided) -> None:
    cluster = decided.split
    assert cluster["part_a"] + cluster["part_b"] == len(cluster["records"]) >= 3
    assert {r["part"] for r in cluster["records"]} == {"A", "B"}
    names = [f["name"] for f in cluster["fields"]]
    assert all(set(r["values"]) == set(names) for r in cluster["records"])
    assert sum(p["proposed_cut"] for p in cluster["pairs"]) == 1
    cut = next(p for p in cluster["pairs"] if p["proposed_cut"])
    assert cut["where"] == "across the split"


def test_bad_cluster_requests_get_clear_errors(reviewed_ws: Path) -> None:
    from integrate.service.app import create_app
    from integrate.service.store import TokenStore

    token = str(TokenStore.for_workspace(reviewed_ws).create("cy", "reviewer").secret)
    case = next(iter(load_review_data(reviewed_ws).cases.values()))
    port = free_port()
    app = create_app([reviewed_ws], port=port)
    with serving(app, port) as base, Client(base, token) as api:
        with pytest.raises(ServiceError) as unknown:
            api.cluster(WS, "E0000000000")
        assert unknown.value.status == 404 and unknown.value.body["error"]["reason"] == "unknown_cluster"
        with pytest.raises(ServiceError) as stranger:
            api.decide_cluster(WS, case.cluster_id, "split", part_a=[("webshop", "NOT-THERE")])
        error = stranger.value.body["errors"][0]
        assert stranger.value.status == 422 and (error["reason"], error["column"]) == ("bad_split", "part_a")
        assert error["value"] == "webshop/NOT-THERE" and error["hint"]
        with pytest.raises(ServiceError) as whole:
            api.decide_cluster(WS, case.cluster_id, "split", part_a=list(case.members))
        assert whole.value.status == 422 and "both parts" in whole.value.body["error"]["message"]
        with pytest.raises(ServiceError) as nothing:
            api.undo_cluster(WS)
        assert nothing.value.status == 404 and nothing.value.body["error"]["reason"] == "nothing_to_undo"
    assert DecisionStore.for_workspace(reviewed_ws).decisions().empty


def test_a_decided_split_is_not_asked_again_next_run(decided: Decided) -> None:
    both = set(_records(decided.split))
    assert not any(set(c.members) >= both for c in load_review_data(decided.root).cases.values())
