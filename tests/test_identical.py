"""A duplicate storm: identical records cost nothing and always merge (issue: duplicate storm).

The issue's reproducers at moderate size: the demo plus 2,000 copies of one record, and one
record repeated once. Before, copies beyond 1,000 were never merged (their blocks were skipped),
two identical records came out as a non-link, and 999 copies lowered the demo's precision.
"""

from __future__ import annotations

from pathlib import Path

import integrate
from integrate.identical import find_identical

from .conftest import copy_workspace


def test_copies_of_a_record_merge_without_pairs_or_lost_precision(tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    root = copy_workspace(tmp_path / "ws")
    path = root / "demo_sources" / "webshop.csv"
    lines = path.read_text(encoding="utf-8").splitlines()
    storm, twin = lines[1].split(","), lines[2].split(",")
    extra = [",".join([f"WS{k:06d}"] + storm[1:]) for k in range(2000)] + [",".join(["WT000001"] + twin[1:])]
    path.write_text("\n".join(lines + extra) + "\n", encoding="utf-8")
    result = integrate.run(root, write=False)
    entity = result.crosswalk.set_index(["source", "record_id"])["entity_id"]
    storm_ids = {entity[("webshop", storm[0])]} | {entity[("webshop", f"WS{k:06d}")] for k in range(2000)}
    assert len(storm_ids) == 1  # all 2,001 in one entity
    assert entity[("webshop", "WT000001")] == entity[("webshop", twin[0])]  # two identical records merge
    assert len(result.pairs) == len(demo_run.pairs)  # the copies added no candidate pair
    before, after = demo_run.quality.evaluation.pairwise, result.quality.evaluation.pairwise
    assert after.precision >= before.precision - 1e-9 and after.recall >= before.recall - 1e-9
    sizes = result.clusters.set_index("entity_id")["records"]
    assert sizes[next(iter(storm_ids))] >= 2001


def test_sparse_records_and_other_sources_are_not_grouped(demo_run) -> None:  # noqa: ANN001
    records = demo_run.records.iloc[:3].copy()
    records = records.iloc[[0, 0, 0]].reset_index(drop=True)
    records["_record_id"] = ["a", "b", "c"]
    records.loc[2, "_source"] = "elsewhere"
    prepared = records[["given_name", "family_name", "email", "postcode"]].astype("string")
    prepared.loc[:, "email"] = "x@example.org"
    same = find_identical(records, prepared, list(prepared.columns))
    assert same.group.tolist() == [0, 0, 1]  # the copy in another source stays apart
    sparse = prepared.assign(email=None, postcode=None)
    assert find_identical(records, sparse, list(sparse.columns)).group.tolist() == [0, 1, 2]
