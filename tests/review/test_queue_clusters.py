"""Suspicious clusters reach the review queue through their weakest link."""

from __future__ import annotations

import pandas as pd

from integrate.review.queue import order_queue, suspicious_links


def _pair(a: str, b: str, p: float, decision: str) -> dict[str, object]:
    return {"source_a": "s", "record_id_a": a, "source_b": "s", "record_id_b": b, "probability": p,
            "decision": decision, "weight": 0.0}


def test_weakest_link_of_a_suspicious_cluster_is_queued() -> None:
    # cluster X = {1, 2, 3} held by links 0.99 and 0.85; cluster Y = {4, 5} one strong link
    pairs = pd.DataFrame([_pair("1", "2", 0.99, "link"), _pair("2", "3", 0.85, "link"),
                          _pair("1", "3", 0.05, "non-link"), _pair("4", "5", 0.99, "link"),
                          _pair("6", "7", 0.5, "possible link")])
    crosswalk = pd.DataFrame({"source": ["s"] * 7, "record_id": list("1234567"),
                              "entity_id": ["X", "X", "X", "Y", "Y", "Z", "W"]})
    clusters = pd.DataFrame({
        "entity_id": ["X", "Y", "Z", "W"], "records": [3, 2, 1, 1], "sources": [1, 1, 1, 1],
        "weakest_link": [0.85, 0.99, None, None], "lowest_pair_probability": [0.05, 0.99, None, None],
        "possible_links_inside": [0, 0, 0, 0], "cut_by": ["", "", "", ""]})
    weakest = suspicious_links(pairs, crosswalk, clusters)
    assert list(zip(weakest["record_id_a"], weakest["record_id_b"])) == [("2", "3")]
    assert "entity X (3 records" in weakest["reason"].iloc[0]
    queue = order_queue(pairs, crosswalk, clusters)
    kinds = set(zip(queue["record_id_a"], queue["reason"].str.split(" ").str[0]))
    assert kinds == {("6", "possible"), ("2", "weakest")}
