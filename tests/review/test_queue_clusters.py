"""Suspicious clusters reach the review queue as a whole, with a proposed split, ordered by records
settled; a decision on one is stored as pairwise decisions that clustering reproduces."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from integrate.cluster import cluster
from integrate.review.clusters import BadSplit, equivalent_decisions, suspicious_clusters
from integrate.review.queue import order_queue


def _pair(a: str, b: str, p: float, decision: str) -> dict[str, object]:
    return {"source_a": "s", "record_id_a": a, "source_b": "s", "record_id_b": b, "probability": p,
            "decision": decision, "weight": 0.0}


# cluster X = {1, 2, 3, 4}: 1-2 and 3-4 strong, held together by 2-3 at 0.85 (1-4 compared clearly
# different); cluster Y = {5, 6} one strong link; 7 ~ 8 a possible link; cut: the run separated
# V = {9} from U = {10} (a link at 0.9 between them, the pair 9-11 clearly different, 11 in U)
PAIRS = pd.DataFrame([
    _pair("1", "2", 0.99, "link"), _pair("2", "3", 0.85, "link"), _pair("3", "4", 0.98, "link"),
    _pair("1", "4", 0.05, "non-link"), _pair("5", "6", 0.99, "link"), _pair("7", "8", 0.5, "possible link"),
    _pair("10", "9", 0.9, "link"), _pair("10", "11", 0.99, "link"), _pair("11", "9", 0.001, "non-link"),
])
CROSSWALK = pd.DataFrame({"source": ["s"] * 11, "record_id": [str(i) for i in range(1, 12)],
                          "entity_id": ["X", "X", "X", "X", "Y", "Y", "Z", "W", "V", "U", "U"]})
CLUSTERS = pd.DataFrame({
    "entity_id": ["X", "Y", "Z", "W", "V", "U"], "records": [4, 2, 1, 1, 1, 2], "sources": [1] * 6,
    "weakest_link": [0.85, 0.99, None, None, None, 0.99],
    "lowest_pair_probability": [0.05, 0.99, None, None, None, 0.99],
    "possible_links_inside": [0] * 6, "cut_by": ["", "", "", "", "chaining guard", "chaining guard"]})
SPLITS = pd.DataFrame([{"reason": "chaining guard", "detail": None, "source_a": "s", "record_id_a": "11",
                        "source_b": "s", "record_id_b": "9", "probability": 0.001, "links_cut": 1, "weight_cut": 0.9}])


def _cases() -> dict[str, object]:
    return {c.cluster_id: c for c in suspicious_clusters(PAIRS, CROSSWALK, CLUSTERS, SPLITS)}


def test_a_doubtful_cluster_is_split_at_the_weakest_link_between_its_clearly_different_records() -> None:
    x = _cases()["X"]
    assert x.members == (("s", "1"), ("s", "2"), ("s", "3"), ("s", "4"))
    assert x.part_a == (("s", "1"), ("s", "2")) and x.part_b == (("s", "3"), ("s", "4"))
    assert x.anchor == ("s", "2", "s", "3") and x.probability == 0.85


def test_a_cut_of_the_run_is_a_case_of_both_entities_split_where_the_run_split_them() -> None:
    cut = _cases()["U+V"]
    assert cut.proposal == "run cut" and cut.entity_ids == ("U", "V")
    assert set(cut.part_a) == {("s", "10"), ("s", "11")} and cut.part_b == (("s", "9"),)
    assert cut.anchor == ("s", "10", "s", "9")  # the link the cut removed


def test_equal_reach_puts_the_most_uncertain_first() -> None:
    pairs = pd.DataFrame([_pair("1", "2", 0.9, "possible link"), _pair("3", "4", 0.6, "possible link")])
    queue = order_queue(pairs)
    assert list(queue["record_id_a"]) == ["3", "1"] and list(queue["reach"]) == [2, 2]


def test_a_cut_a_reviewer_made_is_not_asked_again() -> None:
    decided = SPLITS.assign(reason="different decision")
    assert "U+V" not in {c.cluster_id for c in suspicious_clusters(PAIRS, CROSSWALK, CLUSTERS, decided)}


def test_the_queue_holds_each_cluster_once_with_its_records_as_reach() -> None:
    queue = order_queue(PAIRS, CROSSWALK, CLUSTERS, SPLITS)
    rows = {(r.record_id_a, r.record_id_b): (r.cluster_id, r.reach) for r in queue.itertuples()}
    assert rows == {("7", "8"): ("", 2), ("2", "3"): ("X", 4), ("10", "9"): ("U+V", 3)}
    # by records settled: X (4 records), U+V (3), then the possible link (2), although 7~8 at 0.5 is
    # the most uncertain
    assert list(queue["record_id_a"]) == ["2", "10", "7"]
    expected = queue["reach"] + (1 - np.abs(2 * queue["probability"] - 1)) / 2
    assert np.allclose(queue["priority"], expected)


def _entities_after(decisions: list[tuple[tuple[str, str, str, str], str]]) -> dict[str, int]:
    """Cluster the test pairs with the decisions as constraints (as review/apply.py turns them)."""
    records = pd.DataFrame({"_source": ["s"] * 11, "_record_id": [str(i) for i in range(1, 12)]})
    position = {r: i for i, r in enumerate(records["_record_id"])}
    scored = PAIRS.assign(i=PAIRS["record_id_a"].map(position), j=PAIRS["record_id_b"].map(position))
    must = [(position[k[1]], position[k[3]]) for k, d in decisions if d == "same"]
    cannot = [(position[k[1]], position[k[3]]) for k, d in decisions if d == "different"]
    entities, _ = cluster(records, scored, must_link=must or None, cannot_link=cannot or None)
    return dict(zip(records["_record_id"], pd.factorize(entities["entity_id"])[0]))


def test_split_as_proposed_is_reproduced_by_clustering() -> None:
    x = _cases()["X"]
    decisions = equivalent_decisions(x, PAIRS, "split")
    assert decisions == [(("s", "1", "s", "2"), "same"), (("s", "3", "s", "4"), "same"),
                         (("s", "2", "s", "3"), "different")]
    label = _entities_after(decisions)
    assert label["1"] == label["2"] != label["3"] == label["4"]


def test_a_reviewers_own_split_and_keep_together_are_reproduced() -> None:
    x = _cases()["X"]
    own = equivalent_decisions(x, PAIRS, "split", [("s", "1")])
    label = _entities_after(own)
    assert label["1"] != label["2"] and label["2"] == label["3"] == label["4"]
    assert (("s", "1", "s", "2"), "different") in own  # the strongest link across the reviewer's cut
    cut = _cases()["U+V"]
    keep = equivalent_decisions(cut, PAIRS, "keep together")
    assert [d for _, d in keep] == ["same", "same"]
    label = _entities_after(keep)
    assert label["9"] == label["10"] == label["11"]  # the chaining guard no longer cuts them


def test_a_split_with_an_empty_part_or_a_stranger_is_refused() -> None:
    x = _cases()["X"]
    with pytest.raises(BadSplit, match="needs records in both parts"):
        equivalent_decisions(x, PAIRS, "split", list(x.members))
    with pytest.raises(BadSplit, match="s/9 is not in cluster X"):
        equivalent_decisions(x, PAIRS, "split", [("s", "9")])
