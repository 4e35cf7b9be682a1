"""Clustering: constructed graphs with known answers, and properties that hold for any graph.

Probabilities in the constructed graphs are invented for the tests; each expected cut is worked
out by hand in the comment beside it (a minimum s-t cut is the set of links of least total
evidence, -log(1 - p) per link, whose removal separates the two records).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.cluster import (
    CHAINING_GUARD,
    CONTRADICTION,
    DIFFERENT_BELOW,
    DIFFERENT_DECISION,
    ONE_PER_PERSON,
    cluster,
    cluster_table,
    entity_id_for,
    near_certain_pairs_cut,
)


def make_records(sources: list[str]) -> pd.DataFrame:
    return pd.DataFrame({"_source": sources, "_record_id": [f"r{k}" for k in range(len(sources))]})


def make_pairs(rows: list[tuple[int, int, float]], link: float = 0.8, review: float = 0.2) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=["i", "j", "probability"])
    frame["decision"] = np.select([frame["probability"] >= link, frame["probability"] >= review],
                                  ["link", "possible link"], "non-link")
    return frame


def groups(entities: pd.DataFrame) -> set[frozenset[int]]:
    """The partition as sets of record positions."""
    return {frozenset(members) for members in entities.groupby("entity_id").indices.values()}


def test_connected_components_without_constraints() -> None:
    records = make_records(["a"] * 5)
    pairs = make_pairs([(0, 1, 0.95), (1, 2, 0.9), (3, 4, 0.5)])  # 3-4 is only a possible link
    entities, splits = cluster(records, pairs)
    assert groups(entities) == {frozenset({0, 1, 2}), frozenset({3}), frozenset({4})}
    assert splits == []
    assert entities["cluster_size"].tolist() == [3, 3, 3, 1, 1]


def test_chaining_guard_cuts_the_weaker_link_of_a_chain() -> None:
    # A~B 0.95, B~C 0.85, and A, C compared directly at 0.001: the cheapest cut is B~C (0.85)
    records = make_records(["a", "a", "a"])
    entities, splits = cluster(records, make_pairs([(0, 1, 0.95), (1, 2, 0.85), (0, 2, 0.001)]))
    assert groups(entities) == {frozenset({0, 1}), frozenset({2})}
    assert len(splits) == 1
    assert (splits[0].reason, splits[0].kept_apart, splits[0].links_cut) == (CHAINING_GUARD, (0, 2), 1)
    assert splits[0].cut_weight == pytest.approx(0.85)
    assert splits[0].probability == pytest.approx(0.001)
    assert entities["cut_by"].tolist() == [CHAINING_GUARD] * 3


def test_chaining_guard_ignores_pairs_that_are_only_unlikely() -> None:
    # 0.02 is not "clearly different" (threshold 0.01): the chain stays one cluster
    records = make_records(["a", "a", "a"])
    entities, splits = cluster(records, make_pairs([(0, 1, 0.95), (1, 2, 0.85), (0, 2, 0.02)]))
    assert groups(entities) == {frozenset({0, 1, 2})}
    assert splits == []
    assert DIFFERENT_BELOW == 0.01


def test_different_decision_cuts_the_bridge_between_two_triangles() -> None:
    # triangles {0,1,2} and {3,4,5} (links 0.99) joined by 2-3 (0.9) and 1-4 (0.85).
    # Separating 0 from 5: both bridges cost 1.75; isolating 0 or 5 costs 0.99 + 0.99 = 1.98.
    records = make_records(["a"] * 6)
    rows = [(0, 1, 0.99), (1, 2, 0.99), (0, 2, 0.99), (3, 4, 0.99), (4, 5, 0.99), (3, 5, 0.99),
            (2, 3, 0.9), (1, 4, 0.85)]
    entities, splits = cluster(records, make_pairs(rows), cannot_link=[(0, 5)])
    assert groups(entities) == {frozenset({0, 1, 2}), frozenset({3, 4, 5})}
    assert [(s.reason, s.links_cut) for s in splits] == [(DIFFERENT_DECISION, 2)]
    assert splits[0].cut_weight == pytest.approx(1.75)
    assert splits[0].probability is None  # 0 and 5 were never compared


def test_cut_goes_through_the_weakest_link_even_inside_a_chain() -> None:
    # chain 0-1 (0.81), 1-2 (0.99), 2-3 (0.99); keeping 0 and 3 apart cuts 0-1 only
    records = make_records(["a"] * 4)
    entities, splits = cluster(records, make_pairs([(0, 1, 0.81), (1, 2, 0.99), (2, 3, 0.99)]),
                               cannot_link=np.array([[3, 0]]))
    assert groups(entities) == {frozenset({0}), frozenset({1, 2, 3})}
    assert splits[0].cut_weight == pytest.approx(0.81)


def test_one_strong_link_outweighs_two_weaker_ones_in_a_cut() -> None:
    # 0 (m) and 3 (m) compared clearly different; 1 hangs on 0 by 0.999 and on 2 and 3 by 0.985 and
    # 0.85, while 2-3 is 0.9999. Evidence: 0-1 costs -log(0.001) = 6.91; the other side costs
    # -log(0.015) - log(0.15) = 4.20 + 1.90 = 6.10, so 1 stays with 0. (Summing probabilities
    # instead, 0.999 < 1.835, would wrongly cut the strongest link.)
    records = make_records(["m", "w", "r", "m"])
    pairs = make_pairs([(0, 1, 0.999), (1, 2, 0.985), (1, 3, 0.85), (2, 3, 0.9999), (0, 3, 0.001)])
    entities, splits = cluster(records, pairs)
    assert groups(entities) == {frozenset({0, 1}), frozenset({2, 3})}
    assert (splits[0].links_cut, splits[0].cut_weight) == (2, pytest.approx(0.985 + 0.85))


def test_one_record_per_person_source_never_shares_a_cluster() -> None:
    # source m holds records 0 and 2, linked through 1: cut 1-2 (0.85 < 0.95)
    records = make_records(["m", "w", "m", "w"])
    pairs = make_pairs([(0, 1, 0.95), (1, 2, 0.85), (2, 3, 0.97)])
    entities, splits = cluster(records, pairs, one_per_person=["m"])
    assert groups(entities) == {frozenset({0, 1}), frozenset({2, 3})}
    assert [(s.reason, s.detail) for s in splits] == [(ONE_PER_PERSON, "m")]
    # the same graph without the declaration stays whole
    entities, splits = cluster(records, pairs)
    assert groups(entities) == {frozenset({0, 1, 2, 3})} and splits == []


def test_one_record_per_person_with_three_records_needs_two_cuts() -> None:
    # star around webshop record 0; membership records 1, 2, 3 hang on links 0.9, 0.85, 0.99.
    # Each cut isolates the weaker of the two membership records it separates; the strongest stays.
    records = make_records(["w", "m", "m", "m"])
    pairs = make_pairs([(0, 1, 0.9), (0, 2, 0.85), (0, 3, 0.99)])
    entities, splits = cluster(records, pairs, one_per_person={"m"})
    assert groups(entities) == {frozenset({0, 3}), frozenset({1}), frozenset({2})}
    assert len(splits) == 2


def test_must_link_joins_records_and_is_never_cut() -> None:
    # 0-1 is weakest (0.81) but must-linked, so keeping 0 and 2 apart cuts 1-2 instead
    records = make_records(["a"] * 4)
    pairs = make_pairs([(0, 1, 0.81), (1, 2, 0.99)])
    entities, _ = cluster(records, pairs, cannot_link=[(0, 2)])
    assert groups(entities) == {frozenset({0}), frozenset({1, 2}), frozenset({3})}
    entities, splits = cluster(records, pairs, must_link=[(0, 1), (2, 3)], cannot_link=[(0, 2)])
    # 2-3 were never compared: the must-link alone joins them
    assert groups(entities) == {frozenset({0, 1}), frozenset({2, 3})}
    assert splits[0].links_cut == 1 and splits[0].cut_weight == pytest.approx(0.99)


def test_contradicting_decisions_keep_records_together_and_are_listed() -> None:
    records = make_records(["a", "a"])
    entities, splits = cluster(records, make_pairs([(0, 1, 0.5)]), must_link=[(0, 1)], cannot_link=[(1, 0)])
    assert groups(entities) == {frozenset({0, 1})}
    assert [(s.reason, s.links_cut) for s in splits] == [(CONTRADICTION, 0)]


def test_chaining_guard_respects_same_decisions() -> None:
    # a reviewer said 0 and 2 are the same person: their clearly-different score does not cut them
    records = make_records(["a"] * 3)
    pairs = make_pairs([(0, 1, 0.95), (1, 2, 0.9), (0, 2, 0.001)])
    entities, splits = cluster(records, pairs, must_link=[(0, 2)])
    assert groups(entities) == {frozenset({0, 1, 2})} and splits == []


def test_cluster_figures() -> None:
    # triangle 0-1 0.99, 1-2 0.95, 0-2 0.85: its strongest tree is {0.99, 0.95}, so the weakest
    # link it hangs by is 0.95; the lowest pair inside is the 0.85 link, and 0-3... 3 is alone.
    records = make_records(["a", "b", "b", "c"])
    pairs = make_pairs([(0, 1, 0.99), (1, 2, 0.95), (0, 2, 0.85), (2, 3, 0.3)])
    entities, _ = cluster(records, pairs)
    first = entities.iloc[0]
    assert first["cluster_size"] == 3 and first["sources_in_cluster"] == 2
    assert first["weakest_link"] == pytest.approx(0.95)
    assert first["lowest_pair_probability"] == pytest.approx(0.85)
    assert entities["link_strength"].tolist() == pytest.approx([0.99, 0.99, 0.95, 1.0])
    alone = entities.iloc[3]
    assert np.isnan(alone["weakest_link"]) and alone["possible_links_inside"] == 0
    table = cluster_table(entities, records)
    assert table.columns.tolist()[:3] == ["entity_id", "records", "sources"]
    assert table["records"].tolist() == [3, 1]  # weakest first, singletons (no links) last
    assert table.loc[0, "source_names"] == "a, b"


def test_possible_links_inside_a_cluster_are_counted() -> None:
    records = make_records(["a"] * 3)
    entities, _ = cluster(records, make_pairs([(0, 1, 0.95), (1, 2, 0.9), (0, 2, 0.5)]))
    assert entities["possible_links_inside"].tolist() == [1, 1, 1]
    assert entities["lowest_pair_probability"].tolist() == pytest.approx([0.5] * 3)


def test_entity_id_depends_on_the_smallest_member_key_only() -> None:
    assert entity_id_for(["b\x1f2", "a\x1f9"]) == entity_id_for(["a\x1f9"])
    assert entity_id_for(["a\x1f9"]).startswith("E") and len(entity_id_for(["x"])) == 11


# --- properties -------------------------------------------------------------------------------

@st.composite
def graphs(draw: st.DrawFn) -> tuple[pd.DataFrame, pd.DataFrame, np.ndarray, np.ndarray, list[str]]:
    n = draw(st.integers(2, 12))
    sources = draw(st.lists(st.sampled_from(["m", "w", "r"]), min_size=n, max_size=n))
    all_pairs = [(i, j) for i in range(n) for j in range(i + 1, n)]
    chosen = draw(st.lists(st.sampled_from(all_pairs), unique=True, max_size=min(len(all_pairs), 25)))
    probs = draw(st.lists(st.sampled_from([0.001, 0.005, 0.3, 0.81, 0.9, 0.99]), min_size=len(chosen),
                          max_size=len(chosen)))
    must = draw(st.lists(st.sampled_from(all_pairs), max_size=3))
    cannot = draw(st.lists(st.sampled_from(all_pairs), max_size=3))
    one = draw(st.lists(st.sampled_from(["m", "w", "r"]), unique=True, max_size=2))
    records = make_records(sources)
    pairs = make_pairs([(i, j, p) for (i, j), p in zip(chosen, probs)])
    return records, pairs, np.array(must, np.int64).reshape(-1, 2), np.array(cannot, np.int64).reshape(-1, 2), one


def _must_group(n: int, must: np.ndarray) -> list[int]:
    parent = list(range(n))

    def find(x: int) -> int:
        while parent[x] != x:
            x = parent[x]
        return x

    for a, b in must.tolist():
        parent[find(a)] = find(b)
    return [find(x) for x in range(n)]


@settings(max_examples=150, deadline=None)
@given(graphs())
def test_constraints_hold_for_any_graph(case: tuple) -> None:
    records, pairs, must, cannot, one = case
    entities, _ = cluster(records, pairs, must_link=must, cannot_link=cannot, one_per_person=one)
    label = entities["entity_id"].to_numpy()
    # every record lands in exactly one entity
    assert len(entities) == len(records) and entities["entity_id"].notna().all()
    group = _must_group(len(records), must)
    for a, b in must.tolist():
        assert label[a] == label[b]
    for a, b in cannot.tolist():
        if group[a] != group[b]:
            assert label[a] != label[b]
    for source in one:
        members = [k for k in range(len(records)) if records["_source"][k] == source]
        for x in members:
            for y in members:
                if x < y and group[x] != group[y]:
                    assert label[x] != label[y]
    clear = pairs[pairs["probability"] < DIFFERENT_BELOW]
    for a, b in zip(clear["i"], clear["j"]):
        if group[a] != group[b]:
            assert label[a] != label[b]


@settings(max_examples=100, deadline=None)
@given(graphs(), st.randoms(use_true_random=False))
def test_entities_and_ids_do_not_depend_on_record_order(case: tuple, rnd) -> None:  # noqa: ANN001
    records, pairs, must, cannot, one = case
    before, _ = cluster(records, pairs, must_link=must, cannot_link=cannot, one_per_person=one)
    order = list(range(len(records)))
    rnd.shuffle(order)
    new_position = {old: new for new, old in enumerate(order)}
    shuffled = records.iloc[order].reset_index(drop=True)
    remap = np.vectorize(new_position.get, otypes=[np.int64])
    moved = pairs.assign(i=remap(pairs["i"]) if len(pairs) else pairs["i"],
                         j=remap(pairs["j"]) if len(pairs) else pairs["j"]).sample(frac=1, random_state=1)
    after, _ = cluster(shuffled, moved, must_link=remap(must) if len(must) else must,
                       cannot_link=remap(cannot) if len(cannot) else cannot, one_per_person=one)
    by_key_before = dict(zip(records["_record_id"], before["entity_id"]))
    by_key_after = dict(zip(shuffled["_record_id"], after["entity_id"]))
    assert by_key_before == by_key_after


def test_one_per_person_from_a_mapping_file_holds_in_a_whole_run(workspace) -> None:  # noqa: ANN001
    """Declaring the membership office's export one record per person keeps its records apart."""
    from integrate import run

    mapping = workspace / "mappings" / "membership.yaml"
    text = mapping.read_text(encoding="utf-8")
    mapping.write_text(text.replace("trust: 1\n", "trust: 1\none_per_person: true\n", 1), encoding="utf-8")
    result = run(workspace)
    crosswalk = pd.read_csv(result.output_dir / "crosswalk.csv", dtype=str)
    per_entity = crosswalk[crosswalk["source"] == "membership"].groupby("entity_id").size()
    assert per_entity.max() == 1
    cuts = [s for s in result.splits if s.reason == ONE_PER_PERSON]
    # the demo's membership office registered about 4.5% of its members twice (demo_sources/README.md)
    assert len(cuts) > 50 and all(s.detail == "membership" for s in cuts)
    splits = pd.read_csv(result.output_dir / "splits.csv", dtype=str)
    assert (splits["reason"] == ONE_PER_PERSON).sum() == len(cuts)
    assert (splits.loc[splits["reason"] == ONE_PER_PERSON, ["source_a", "source_b"]] == "membership").all().all()


@settings(max_examples=100, deadline=None)
@given(graphs())
def test_weakest_link_is_the_smallest_edge_of_networkx_maximum_spanning_tree(case: tuple) -> None:
    # reference: networkx' maximum spanning tree of each cluster's links (must-links count 1.0);
    # every maximum spanning tree has the same smallest edge (bottleneck property)
    import networkx as nx

    records, pairs, must, cannot, one = case
    entities, _ = cluster(records, pairs, must_link=must, cannot_link=cannot, one_per_person=one)
    label = entities["entity_id"].to_numpy()
    graph = nx.Graph()
    for a, b, p, d in zip(pairs["i"], pairs["j"], pairs["probability"], pairs["decision"]):
        if d == "link" and label[a] == label[b]:
            graph.add_edge(int(a), int(b), p=float(p))
    for a, b in must.tolist():
        if a != b:
            graph.add_edge(a, b, p=1.0)
    expected = {}
    for a, _, p in nx.maximum_spanning_tree(graph, weight="p").edges(data="p"):
        expected[label[a]] = min(expected.get(label[a], 1.0), p)
    for entity, weakest in zip(label, entities["weakest_link"]):
        if entity in expected:
            assert weakest == expected[entity]
        else:
            assert np.isnan(weakest)


# --- cuts keep the partition with the most evidence --------------------------------------------

def _min_cut_sides(rows: list[tuple[int, int, float]], a: int, b: int) -> set[frozenset[int]]:
    """Reference: networkx' minimum s-t cut on the links (capacity -log(1 - p)), as the earlier
    chaining guard cut."""
    import networkx as nx

    graph = nx.Graph()
    graph.add_edges_from((x, y, {"capacity": -np.log(1 - p)}) for x, y, p in rows if p >= 0.8)
    _, (side_a, side_b) = nx.minimum_cut(graph, a, b)
    return {frozenset(side_a), frozenset(side_b)}


def test_household_member_chaining_through_a_shared_phone_is_cut_not_the_identical_partner() -> None:
    # A person's records 0, 1, 2, 3; 0 and 1 identical (0.999). A household member (4) shares the
    # family phone and so links to 0, 2 and 3 at 0.95 each, and was compared with 1 as clearly
    # different (0.005). 1 was compared with 2 and 3 at 0.75 (possible links, not links).
    # A minimum cut between 1 and 4 removes the cheapest links: 0-1 costs -log(0.001) = 6.91,
    # cutting 4 away costs 3 x -log(0.05) = 8.99, so it cut the identical partner 1 away.
    # Kept evidence (log-odds): {0,2,3,4},{1} keeps 3 x 2.94 = 8.83 (plus the links among 0, 2, 3,
    # common to both); {0,1,2,3},{4} keeps 6.91 + 2 x 1.10 = 9.11, the larger: 4 is cut instead.
    rows = [(0, 1, 0.999), (0, 2, 0.97), (0, 3, 0.97), (2, 3, 0.97), (0, 4, 0.95), (2, 4, 0.95),
            (3, 4, 0.95), (1, 4, 0.005), (1, 2, 0.75), (1, 3, 0.75)]
    assert frozenset({1}) in _min_cut_sides(rows, 1, 4)  # what the minimum cut did
    records = make_records(["a"] * 5)
    pairs = make_pairs(rows)
    entities, splits = cluster(records, pairs)
    assert groups(entities) == {frozenset({0, 1, 2, 3}), frozenset({4})}
    assert [(s.reason, s.links_cut) for s in splits] == [(CHAINING_GUARD, 3)]
    assert near_certain_pairs_cut(pairs, entities["entity_id"]) == 0


def test_a_pair_at_probability_one_stays_together_whatever_chains_into_it() -> None:
    # 0-1 identical (1.0). Records 2..6 form a tight group (0.99 among them) that links to 0 through
    # five shared-contact links at 0.9 each; 1 was compared with each of 2..6 as clearly different.
    # Keeping 1 with 0 keeps 20 (the clip of log-odds at 1.0); keeping 0 with 2..6 keeps 5 x 2.20
    # = 11.0: the group is cut away, the identical pair stays whole.
    rows = [(0, 1, 1.0)] + [(0, k, 0.9) for k in range(2, 7)] + [(1, k, 0.001) for k in range(2, 7)]
    rows += [(x, y, 0.99) for x in range(2, 7) for y in range(x + 1, 7)]
    records = make_records(["a"] * 7)
    pairs = make_pairs(rows)
    entities, splits = cluster(records, pairs)
    assert groups(entities) == {frozenset({0, 1}), frozenset(range(2, 7))}
    assert near_certain_pairs_cut(pairs, entities["entity_id"]) == 0
    assert splits[0].links_cut == 5


def _best_partition_by_enumeration(n: int, weight: dict[tuple[int, int], float], apart: set[tuple[int, int]]
                                   ) -> float:
    """Reference: the best kept evidence over every set partition of n records (brute force)."""
    best = -np.inf

    def walk(t: int, part: list[int]) -> None:
        nonlocal best
        if t == n:
            if all(part[a] != part[b] for a, b in apart):
                best = max(best, sum(w for (a, b), w in weight.items() if part[a] == part[b]))
            return
        for label in range(max(part, default=-1) + 2):
            walk(t + 1, part + [label])

    walk(0, [])
    return best


@settings(max_examples=60, deadline=None)
@given(graphs())
def test_cut_keeps_the_most_evidence_of_any_partition(case: tuple) -> None:
    # reference: brute-force enumeration of set partitions (Bell numbers; n <= 8 here) of the same
    # objective, sum of log-odds of compared pairs kept together, under the same hard constraints
    records, pairs, _, _, _ = case
    n = len(records)
    if n > 8:
        return
    entities, splits = cluster(records, pairs)
    if not splits:
        return
    label = pd.factorize(entities["entity_id"])[0]
    # only the links join: the reference works on the one component that was cut
    component = {x for s in splits for x in s.kept_apart}
    links = pairs[pairs["decision"] == "link"]
    grow = True
    while grow:
        grow = False
        for a, b in zip(links["i"], links["j"]):
            if (a in component) != (b in component):
                component |= {int(a), int(b)}
                grow = True
    inside = sorted(component)
    index = {x: k for k, x in enumerate(inside)}
    weight: dict[tuple[int, int], float] = {}
    apart: set[tuple[int, int]] = set()
    for a, b, p in zip(pairs["i"], pairs["j"], pairs["probability"]):
        if a in index and b in index:
            q = min(max(p, 1e-9), 1 - 1e-9)
            weight[(index[a], index[b])] = weight.get((index[a], index[b]), 0.0) + float(np.log(q / (1 - q)))
            if p < DIFFERENT_BELOW:
                apart.add((index[a], index[b]))
    ours = sum(w for (a, b), w in weight.items() if label[inside[a]] == label[inside[b]])
    # our pieces are also split into link-connected parts, which can only lose evidence kept by
    # compared non-link pairs; so ours is at most the optimum, and equal when no such pair is lost
    best = _best_partition_by_enumeration(len(inside), weight, apart)
    assert ours <= best + 1e-6
    assert ours >= best - sum(max(w, 0) for (a, b), w in weight.items()
                              if pairs_decision(pairs, inside[a], inside[b]) != "link") - 1e-6


def pairs_decision(pairs: pd.DataFrame, a: int, b: int) -> str:
    hit = pairs[((pairs["i"] == a) & (pairs["j"] == b)) | ((pairs["i"] == b) & (pairs["j"] == a))]
    return str(hit["decision"].iloc[0]) if len(hit) else ""
