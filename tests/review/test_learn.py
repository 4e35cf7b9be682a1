"""Re-estimating the model with decisions: EM with decided pairs held to their decision."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from integrate import score as fs
from integrate.review.learn import DIFFERENT, SAME, DecisionEstimator, estimate_with_labels, threshold_estimates

TYPES = {"email": "email", "birth_date": "date", "family_name": "person_name"}


def _synthetic(n_match: int = 400, n_non: int = 3600, seed: int = 5) -> tuple[pd.DataFrame, np.ndarray]:
    """Grades drawn from known profiles (invented for the test): matches mostly agree."""
    rng = np.random.default_rng(seed)
    columns, truth = {}, np.r_[np.ones(n_match, bool), np.zeros(n_non, bool)]
    for f, t in TYPES.items():
        levels = len(fs.GRADE_NAMES[t])
        m = np.r_[[0.05], np.full(levels - 2, 0.1 / max(levels - 2, 1)), [0.85]]
        u = np.r_[[0.85], np.full(levels - 2, 0.1 / max(levels - 2, 1)), [0.05]]
        columns[f] = np.where(truth, rng.choice(levels, truth.size, p=m / m.sum()),
                              rng.choice(levels, truth.size, p=u / u.sum()))
    return pd.DataFrame(columns).astype(np.int64), truth


def _u_random(grades: pd.DataFrame) -> dict[str, np.ndarray]:
    """Grade shares among all pairs, standing in for the random record pairs that start EM."""
    out = {}
    for f, t in TYPES.items():
        counts = np.bincount(grades[f].to_numpy(), minlength=len(fs.GRADE_NAMES[t])) + 0.5
        out[f] = counts / counts.sum()
    return out


def test_without_decisions_em_stays_where_it_converged() -> None:
    grades, _ = _synthetic()
    u_random = _u_random(grades)
    base = fs.estimate(grades, TYPES, u_random)
    again = estimate_with_labels(grades, TYPES, u_random, np.zeros(len(grades), np.int8), base)
    for f in TYPES:
        assert again.fields[f].m == pytest.approx(base.fields[f].m, abs=1e-3)
    assert again.prior == pytest.approx(base.prior, abs=1e-3)


def test_decided_pairs_are_held_to_their_decision() -> None:
    grades, truth = _synthetic()
    u_random = _u_random(grades)
    base = fs.estimate(grades, TYPES, u_random)
    labels = np.zeros(len(grades), np.int8)
    # reviewers decided the hardest cases: matches that disagree on e-mail, non-matches that agree
    hard_same = np.flatnonzero(truth & (grades["email"].to_numpy() == 0))[:60]
    hard_diff = np.flatnonzero(~truth & (grades["email"].to_numpy() == 2))[:60]
    labels[hard_same], labels[hard_diff] = SAME, DIFFERENT
    learned = estimate_with_labels(grades, TYPES, u_random, labels, base)
    names = list(TYPES)
    G = grades[names].to_numpy(np.int64)
    weight = learned.pattern_weight(G, names) + learned.prior_weight
    probability = 1 / (1 + np.exp2(-weight))
    assert learned.fields["email"].m[0] > base.fields["email"].m[0]  # matches may disagree on e-mail
    assert probability[hard_same].mean() > (1 / (1 + np.exp2(-(base.pattern_weight(G, names) + base.prior_weight)))
                                            )[hard_same].mean()


def test_too_few_decisions_leave_the_model_as_it_was() -> None:
    grades, truth = _synthetic()
    pairs = pd.DataFrame({"i": np.arange(len(grades)), "j": np.arange(len(grades)) + 10_000})
    decided = pd.DataFrame({"i": pairs["i"][:10], "j": pairs["j"][:10], "same": truth[:10]})
    estimator = DecisionEstimator(decided, min_each=50)
    model = estimator(pairs, grades, TYPES, _u_random(grades))
    assert model is estimator.base and estimator.learned is None
    assert estimator.labelled_same == 10 and estimator.labelled_different == 0


def test_threshold_estimates_by_hand() -> None:
    # p = 0.9, 0.5, 0.1 (Σ 1.5): at 0.8 one pair, precision 0.9, recall 0.9/1.5;
    # at 0.2 two pairs, precision (0.9 + 0.5)/2, recall 1.4/1.5
    table = threshold_estimates(np.array([0.9, 0.5, 0.1]), {"link": 0.8, "review": 0.2}).set_index("threshold")
    assert table.loc["link", "pairs at or above"] == 1
    assert table.loc["link", "precision (estimated)"] == pytest.approx(0.9)
    assert table.loc["link", "recall (estimated)"] == pytest.approx(0.6)
    assert table.loc["review", "precision (estimated)"] == pytest.approx(0.7)
    assert table.loc["review", "recall (estimated)"] == pytest.approx(1.4 / 1.5)
