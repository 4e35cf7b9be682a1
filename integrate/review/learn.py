"""Re-estimating the Fellegi–Sunter parameters with reviewers' decisions.

With enough decided pairs (``MIN_EACH`` of each kind among the candidate pairs), EM runs again
with every decided pair held to its decision: a ``same`` pair belongs to the match class with
probability 1, a ``different`` pair to the non-match classes (shared among them as EM sees fit).
The undecided pairs are estimated as before. This is EM with partly classified data: the
decisions anchor the classes where unsupervised EM is least sure, and the m/u estimates follow.
The EM is score.estimate's (its ``labels`` argument);
EM starts from the model fitted without decisions, so the two are directly comparable; the run
report shows both models' precision and recall estimates at the two thresholds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .. import score as fs
from ..score import ScoreModel, model_grades

MIN_EACH = 50  # decisions of each kind (same, different) needed before they re-estimate the model
SAME, DIFFERENT = fs.LABEL_SAME, fs.LABEL_DIFFERENT  # label codes for decided pairs (0: undecided)


def estimate_with_labels(grades: pd.DataFrame, types: dict[str, str], u_random: dict[str, np.ndarray],
                         labels: np.ndarray, start: ScoreModel, background: pd.DataFrame | None = None,
                         background_weight: float = 0.0, records: int | None = None) -> ScoreModel:
    """EM over grade patterns with decided pairs held to their class (see the module docstring).

    Args:
        grades: the model's grades per candidate pair (as ``score.model_grades`` makes them).
        labels: per candidate pair 0 (undecided), ``SAME`` or ``DIFFERENT``.
        start: the model fitted without decisions; its class profiles and shares start EM.
        background, background_weight: the random record pairs standing for the pairs blocking
            did not propose, as in ``score.estimate``; records: as there (the bound on matches).
    """
    return fs.estimate(grades, types, u_random, background, background_weight, labels=labels, start=start,
                       records=records)


class DecisionEstimator:
    """The estimator ``score()`` calls when a run has decisions: EM without them, then with them.

    Args:
        decided: positions ``i``, ``j`` of decided record pairs and ``same`` (bool).
        min_each: decisions of each kind needed among the candidate pairs.
    """

    def __init__(self, decided: pd.DataFrame, min_each: int = MIN_EACH) -> None:
        i, j = decided["i"].to_numpy(np.int64), decided["j"].to_numpy(np.int64)
        self.decided = pd.DataFrame({"i": np.minimum(i, j), "j": np.maximum(i, j),
                                     "_label": np.where(decided["same"].to_numpy(bool), SAME, DIFFERENT)})
        self.decided = self.decided.drop_duplicates(["i", "j"], keep="last")
        self.min_each = min_each
        self.base: ScoreModel | None = None
        self.learned: ScoreModel | None = None
        self.labelled_same = self.labelled_different = 0

    def __call__(self, pairs: pd.DataFrame, grades: pd.DataFrame, types: dict[str, str],
                 u_random: dict[str, np.ndarray], background: pd.DataFrame | None = None,
                 background_weight: float = 0.0, records: int | None = None) -> ScoreModel:
        self.base = fs.estimate(grades, types, u_random, background, background_weight, records=records)
        i, j = pairs["i"].to_numpy(np.int64), pairs["j"].to_numpy(np.int64)
        keyed = pd.DataFrame({"i": np.minimum(i, j), "j": np.maximum(i, j)})
        labels = keyed.merge(self.decided, on=["i", "j"], how="left")["_label"].fillna(0).to_numpy(np.int8)
        self.labelled_same = int((labels == SAME).sum())
        self.labelled_different = int((labels == DIFFERENT).sum())
        if min(self.labelled_same, self.labelled_different) < self.min_each:
            return self.base
        self.learned = estimate_with_labels(grades, types, u_random, labels, self.base, background,
                                            background_weight, records=records)
        return self.learned


def threshold_estimates(probability: np.ndarray, thresholds: dict[str, float]) -> pd.DataFrame:
    """Model-based precision and recall of deciding 'at or above the threshold'.

    With p the match probability of each candidate pair, the expected matches at or above t are
    Σ p over those pairs: precision ≈ their mean p, recall ≈ their Σ p over Σ p of all pairs.
    """
    total = float(probability.sum())
    rows = []
    for name, t in thresholds.items():
        above = probability >= t
        expected = float(probability[above].sum())
        rows.append({"threshold": name, "at": t, "pairs at or above": int(above.sum()),
                     "precision (estimated)": expected / above.sum() if above.any() else float("nan"),
                     "recall (estimated)": expected / total if total else float("nan")})
    return pd.DataFrame(rows)


def compare_models(scored: pd.DataFrame, estimator: DecisionEstimator, thresholds: dict[str, float],
                   field_types: dict[str, str]) -> pd.DataFrame | None:
    """Precision/recall estimates at the thresholds without and with the decisions (None if not re-estimated)."""
    if estimator.learned is None or estimator.base is None:
        return None
    names = list(estimator.learned.fields)
    grades = pd.DataFrame({f: scored["g_" + f].to_numpy() for f in field_types})
    joint, _ = model_grades(grades, field_types)
    G = joint[names].to_numpy(np.int64)
    tf = {c[3:]: scored[c].to_numpy(float) for c in scored.columns if c.startswith("tf_")}
    bonus = np.sum(list(tf.values()), axis=0) if tf else np.zeros(len(scored))
    shared = fs.family_rarity(tf, field_types)
    frames = []
    for label, model in (("without decisions", estimator.base), ("with decisions", estimator.learned)):
        weight = model.pattern_weight(G, names, bonus, shared)
        probability = 1.0 / (1.0 + np.exp2(-(weight + model.prior_weights(G))))
        frames.append(threshold_estimates(probability, thresholds).assign(model=label))
    return pd.concat(frames, ignore_index=True)
