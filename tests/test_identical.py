"""A duplicate storm: identical records cost nothing and always merge (issue 19's reproducers).

The demo plus 20,000 copies of one record, and one record repeated once. Before, the storm cost
the demo's pairwise precision 0.996 -> 0.929 (the copies skewed the model), and two identical
records could come out as a non-link.
"""

from __future__ import annotations

from itertools import combinations
from pathlib import Path

import numpy as np

import integrate
from integrate.evaluate import true_pairs_found
from integrate.identical import find_identical

from .conftest import copy_workspace


def test_copies_of_a_record_merge_without_pairs_or_lost_precision(tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    root = copy_workspace(tmp_path / "ws")
    path = root / "demo_sources" / "webshop.csv"
    lines = path.read_text(encoding="utf-8").splitlines()
    storm, twin = lines[1].split(";"), lines[2].split(";")  # the shop writes semicolon-separated files
    extra = [";".join([f"WS{k:06d}"] + storm[1:]) for k in range(20_000)] + [";".join(["WT000001"] + twin[1:])]
    path.write_text("\n".join(lines + extra) + "\n", encoding="utf-8")
    result = integrate.run(root, write=False)
    entity = result.crosswalk.set_index(["source", "record_id"])["entity_id"]
    storm_ids = {entity[("webshop", storm[0])]} | {entity[("webshop", f"WS{k:06d}")] for k in range(20_000)}
    assert len(storm_ids) == 1  # all 20,001 in one entity
    assert entity[("webshop", "WT000001")] == entity[("webshop", twin[0])]  # two identical records merge
    assert len(result.pairs) == len(demo_run.pairs)  # the copies added no candidate pair
    before, after = demo_run.quality.evaluation, result.quality.evaluation
    assert after.pairwise.precision >= before.pairwise.precision - 1e-9
    assert after.pairwise.recall >= before.pairwise.recall - 1e-9
    assert after.pairs_completeness >= before.pairs_completeness - 1e-9
    sizes = result.clusters.set_index("entity_id")["records"]
    assert sizes[next(iter(storm_ids))] >= 20_001
    assert result.blocking.identical_copies >= 20_001


def test_sparse_records_and_other_sources_are_not_grouped(demo_run) -> None:  # noqa: ANN001
    records = demo_run.records.iloc[:3].copy()
    records = records.iloc[[0, 0, 0]].reset_index(drop=True)
    records["_record_id"] = ["b", "a", "c"]
    records.loc[2, "_source"] = "elsewhere"
    prepared = records[["given_name", "family_name", "email", "postcode"]].astype("string")
    prepared.loc[:, "email"] = "x@example.org"
    same = find_identical(records, prepared, list(prepared.columns))
    assert same.group.tolist() == [0, 0, 1]  # the copy in another source stays apart
    assert same.copy_of.tolist() == [1, 1, 2]  # the smallest record key ('a') stands for the group
    sparse = prepared.assign(email=None, postcode=None)
    assert find_identical(records, sparse, list(sparse.columns)).group.tolist() == [0, 1, 2]
    # a record named by a reviewer's decision keeps its own place
    decided = find_identical(records, prepared, list(prepared.columns), cannot_link=np.array([[0, 2]]))
    assert decided.group.tolist() == [0, 1, 2]


def test_true_pairs_found_counts_what_copies_stand_for() -> None:
    # reference: brute force over all record pairs (a pair is found when both records are one
    # record's copies, or their representatives are a candidate pair)
    rng = np.random.default_rng(5)
    n = 60
    entity = rng.integers(-1, 8, size=n)
    copy_of = np.arange(n)
    heads = rng.choice(n, size=15, replace=False)
    for k in range(n):
        if k not in heads and rng.random() < 0.5:
            copy_of[k] = heads[rng.integers(0, len(heads))]
    reps = np.unique(copy_of)
    cand = np.array([p for p in combinations(reps, 2) if rng.random() < 0.4])
    chosen = {tuple(p) for p in cand}
    expected = sum(1 for a, b in combinations(range(n), 2)
                   if entity[a] >= 0 and entity[a] == entity[b]
                   and (copy_of[a] == copy_of[b] or tuple(sorted((copy_of[a], copy_of[b]))) in chosen))
    assert true_pairs_found(entity, cand[:, 0], cand[:, 1], copy_of) == expected
    # without copies: the candidate pairs alone
    direct = sum(1 for a, b in cand if entity[a] >= 0 and entity[a] == entity[b])
    assert true_pairs_found(entity, cand[:, 0], cand[:, 1]) == direct
