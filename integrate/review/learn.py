"""Re-estimating the Fellegi–Sunter parameters with reviewers' decisions.

With enough decided pairs (``MIN_EACH`` of each kind among the candidate pairs), EM runs again
with every decided pair held to its decision: a ``same`` pair belongs to the match class with
probability 1, a ``different`` pair to the non-match classes (shared among them as EM sees fit).
The undecided pairs are estimated as before. This is EM with partly classified data: the
decisions anchor the classes where unsupervised EM is least sure, and the m/u estimates follow.
The M-step is score.estimate's, step for step (keep the two in step);
EM starts from the model fitted without decisions, so the two are directly comparable; the run
report shows both models' precision and recall estimates at the two thresholds.
"""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd

from .. import score as fs
from ..compare import MISSING, NAME_PAIR
from ..score import MATCH, FieldModel, ScoreModel, model_grades

MIN_EACH = 50  # decisions of each kind (same, different) needed before they re-estimate the model
SAME, DIFFERENT = 1, 2  # label codes for decided pairs (0: undecided)


def estimate_with_labels(grades: pd.DataFrame, types: dict[str, str], u_random: dict[str, np.ndarray],
                         labels: np.ndarray, start: ScoreModel, background: pd.DataFrame | None = None,
                         background_weight: float = 0.0) -> ScoreModel:
    """EM over grade patterns with decided pairs held to their class (see the module docstring).

    Args:
        grades: the model's grades per candidate pair (as ``score.model_grades`` makes them).
        labels: per candidate pair 0 (undecided), ``SAME`` or ``DIFFERENT``.
        start: the model fitted without decisions; its class profiles and shares start EM.
        background, background_weight: the random record pairs standing for the pairs blocking
            did not propose, as in ``score.estimate``.
    """
    names = list(grades.columns)
    frames = [grades.assign(_w=1.0, _label=np.asarray(labels, np.int8))]
    if background is not None and len(background) and background_weight > 0:
        frames.append(background[names].assign(_w=background_weight, _label=np.int8(0)))
    patterns = pd.concat(frames, ignore_index=True).groupby(names + ["_label"], sort=False)["_w"].sum().reset_index()
    counts = patterns["_w"].to_numpy(float)
    label = patterns["_label"].to_numpy()
    G = patterns[names].to_numpy(np.int64)
    _, _, free = fs._initial_classes(types, u_random)
    relatives_names = getattr(fs, "_relatives_names", None)
    theta = copy.deepcopy(start._theta)
    shares = dict(start.class_shares)
    classes = list(theta)
    match_row = classes.index(MATCH)
    same, different = label == SAME, label == DIFFERENT
    converged, previous, iteration = False, -np.inf, 0
    for iteration in range(1, fs.EM_MAX_ITER + 1):  # noqa: B007 - the count is reported
        log_f = np.zeros((len(classes), len(G)))
        for c, k in enumerate(classes):
            log_f[c] += np.log(shares[k])
            for col, f in enumerate(names):
                g = G[:, col]
                present = g != MISSING
                log_f[c, present] += np.log(theta[k][f][g[present]])
        # a decided pair can only be in the classes its decision allows
        allowed = np.ones_like(log_f, dtype=bool)
        allowed[:, same] = False
        allowed[match_row, same] = True
        allowed[match_row, different] = False
        log_f = np.where(allowed, log_f, -np.inf)
        log_total = np.logaddexp.reduce(log_f, axis=0)
        post = np.exp(log_f - log_total)
        likelihood = float((counts * log_total).sum())
        if abs(likelihood - previous) <= fs.EM_TOLERANCE * abs(likelihood):
            converged = True
            break
        previous = likelihood
        for c, k in enumerate(classes):
            w = counts * post[c]
            shares[k] = float(np.clip(w.sum() / counts.sum(), 1e-9, 1 - 1e-9))
            for col, f in enumerate(names):
                if f not in free[k]:
                    continue
                g = G[:, col]
                present = g != MISSING
                new = np.bincount(g[present], weights=w[present], minlength=len(theta[k][f])) + fs.PSEUDO_COUNT
                if k == fs.RELATED and types[f] == NAME_PAIR and relatives_names is not None:
                    new = relatives_names(new, u_random[f])  # the same M-step as score.estimate
                theta[k][f] = new / new.sum()
    non = [k for k in classes if k != MATCH]
    total_non = sum(shares[k] for k in non)
    fields = {}
    for f in names:
        u = sum(shares[k] * theta[k][f] for k in non) / total_non
        related = theta[fs.RELATED][f].tolist() if fs.RELATED in theta else None
        fields[f] = FieldModel(f, types[f], theta[MATCH][f].tolist(), u.tolist(), u_random[f].tolist(), related)
    model = ScoreModel(fields, shares[MATCH], iteration, converged, dict(shares), _theta=theta)
    model.warnings.extend(fs._plausibility(model))
    return model


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
                 background_weight: float = 0.0) -> ScoreModel:
        self.base = fs.estimate(grades, types, u_random, background, background_weight)
        i, j = pairs["i"].to_numpy(np.int64), pairs["j"].to_numpy(np.int64)
        keyed = pd.DataFrame({"i": np.minimum(i, j), "j": np.maximum(i, j)})
        labels = keyed.merge(self.decided, on=["i", "j"], how="left")["_label"].fillna(0).to_numpy(np.int8)
        self.labelled_same = int((labels == SAME).sum())
        self.labelled_different = int((labels == DIFFERENT).sum())
        if min(self.labelled_same, self.labelled_different) < self.min_each:
            return self.base
        self.learned = estimate_with_labels(grades, types, u_random, labels, self.base, background,
                                            background_weight)
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
    bonus = scored[[c for c in scored.columns if c.startswith("tf_")]].sum(axis=1).to_numpy(float)
    frames = []
    for label, model in (("without decisions", estimator.base), ("with decisions", estimator.learned)):
        weight = model.pattern_weight(G, names) + bonus
        probability = 1.0 / (1.0 + np.exp2(-(weight + model.prior_weight)))
        frames.append(threshold_estimates(probability, thresholds).assign(model=label))
    return pd.concat(frames, ignore_index=True)
