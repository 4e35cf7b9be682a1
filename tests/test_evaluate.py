"""Evaluation measures against their definitions (REFERENCE_CHECKS §6)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from integrate.evaluate import Scores, bcubed_scores, evaluate, pairwise_scores


def test_precision_recall_f_from_counts() -> None:
    # TP 90, FP 10, FN 30 -> P 0.9, R 0.75, F 0.818182 (Christen 2012 ch. 7 definitions;
    # values recomputed with scikit-learn in REFERENCE_CHECKS §6)
    s = Scores.from_counts(90, 10, 30)
    assert (s.precision, s.recall) == (0.9, 0.75)
    assert s.f1 == pytest.approx(0.818182, abs=1e-6)


def test_pairwise_scores_count_pairs_inside_clusters() -> None:
    truth = np.array([0, 0, 0, 1, 1])      # true pairs: (0,1) (0,2) (1,2) (3,4)
    predicted = np.array([0, 0, 1, 1, 2])  # predicted pairs: (0,1) (2,3)
    scores, true_pairs, predicted_pairs = pairwise_scores(predicted, truth)
    assert (true_pairs, predicted_pairs) == (4, 2)
    assert scores.precision == 0.5 and scores.recall == 0.25


def test_bcubed_by_hand() -> None:
    # Bagga & Baldwin (1998) B-cubed: per record, |own cluster ∩ true cluster| / |own cluster|.
    truth = np.array([0, 0, 0, 1, 1])
    predicted = np.array([0, 0, 1, 1, 2])
    s = bcubed_scores(predicted, truth)
    # precision: records 0,1 -> 2/2; record 2 -> 1/2; record 3 -> 1/2; record 4 -> 1/1
    assert s.precision == pytest.approx((1 + 1 + 0.5 + 0.5 + 1) / 5)
    # recall: records 0,1 -> 2/3; record 2 -> 1/3; record 3 -> 1/2; record 4 -> 1/2
    assert s.recall == pytest.approx((2 / 3 + 2 / 3 + 1 / 3 + 0.5 + 0.5) / 5)


def test_reduction_ratio_and_pairs_completeness() -> None:
    records = pd.DataFrame({"_source": ["a"] * 4, "_record_id": ["1", "2", "3", "4"]})
    truth = pd.DataFrame({"source": ["a"] * 4, "record_id": ["1", "2", "3", "4"], "entity_id": ["x", "x", "y", "y"]})
    candidates = pd.DataFrame({"i": [0, 1], "j": [1, 2]})
    result = evaluate(truth, truth, candidates, records)
    assert result.pairs_completeness == 0.5  # (0,1) found, (2,3) missed
    assert result.reduction_ratio == pytest.approx(1 - 2 / 6)  # RR = 1 - candidates / all pairs


def test_hard_negatives_count_relatives_and_namesakes() -> None:
    from integrate.evaluate import hard_negatives

    records = pd.DataFrame({"_source": ["a"] * 4, "_record_id": ["1", "2", "3", "4"]})
    prepared = pd.DataFrame({"given": ["ann", "bob", "ann", "ann"], "family": ["lee", "lee", "lee", "lee"],
                             "phone": ["+1", "+1", None, "+2"]})
    truth = records.rename(columns={"_source": "source", "_record_id": "record_id"}).assign(
        entity_id=["p1", "p2", "p3", "p1"])
    candidates = pd.DataFrame({"i": [0, 0, 0, 1], "j": [1, 2, 3, 2]})
    merged_as = np.array(["e1", "e1", "e2", "e1"])  # records 1 and 2 wrongly merged with 1
    table = hard_negatives(records, prepared, candidates, merged_as, truth, given="given", family="family",
                           contact=["phone"]).set_index("kind")
    relatives = table.loc[table.index.str.startswith("relatives")].iloc[0]
    namesakes = table.loc[table.index.str.startswith("namesakes")].iloc[0]
    # (0,1): ann/bob lee sharing +1 -> relatives, merged; (0,2): two different Ann Lees -> namesakes
    assert (relatives["candidate pairs"], relatives["wrongly merged"]) == (1, 1)
    assert (namesakes["candidate pairs"], namesakes["wrongly merged"]) == (1, 0)


def test_hard_negatives_count_twins_marked_in_the_truth_as_their_own_kind() -> None:
    from integrate.evaluate import hard_negatives

    records = pd.DataFrame({"_source": ["a"] * 5, "_record_id": ["1", "2", "3", "4", "5"]})
    prepared = pd.DataFrame({"given": ["ann", "bea", "ann", "cat", "bea"], "family": ["lee"] * 5,
                             "phone": ["+1", "+1", "+1", "+1", None]})
    # p1 and p2 are twins (records 1, 2 and 5); p3 is a namesake of p1, p4 a sister
    truth = records.rename(columns={"_source": "source", "_record_id": "record_id"}).assign(
        entity_id=["p1", "p2", "p3", "p4", "p2"], twins=["T1", "T1", None, "", "T1"])
    candidates = pd.DataFrame({"i": [0, 0, 0, 1, 1], "j": [1, 2, 3, 3, 4]})
    merged_as = np.array(["e1", "e1", "e2", "e3", "e1"])  # the twins' (0,1) wrongly merged
    table = hard_negatives(records, prepared, candidates, merged_as, truth, given="given", family="family",
                           contact=["phone"]).set_index("kind")
    counts = {kind.split(" ")[0]: (row["candidate pairs"], row["wrongly merged"]) for kind, row in table.iterrows()}
    # (0,1) twins, not also relatives; (1,4) one twin's two records: a true pair, no kind;
    # (0,3), (1,3) relatives; (0,2) namesakes
    assert counts == {"twins": (1, 1), "relatives": (2, 0), "namesakes": (1, 0)}


def test_scores_within_one_source_and_across_sources() -> None:
    from integrate.evaluate import scores_by_source_kind

    truth = pd.DataFrame({"source": ["a", "a", "b", "b", "a"], "record_id": ["1", "2", "1", "2", "3"],
                          "entity_id": ["x", "x", "x", "y", "z"]})
    # predicted: a1+a2 together (right), b1 apart (missed twice across), b2 with a3 (wrong, across)
    crosswalk = truth.assign(entity_id=["e1", "e1", "e2", "e3", "e3"])
    scores = scores_by_source_kind(crosswalk, truth)
    within, across = scores["within one source"], scores["across sources"]
    assert (within.precision, within.recall) == (1.0, 1.0)  # (a1, a2): the one true pair in a source
    # across: true pairs (a1,b1), (a2,b1) both missed; the one predicted pair (a3,b2) is wrong
    assert (across.precision, across.recall) == (0.0, 0.0)
