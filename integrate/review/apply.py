"""Review decisions inside a run: constraints for clustering, labels for the model, a summary.

Every run applies every standing decision, whatever the scores say, as long as both records
still exist: ``same`` joins the two records (a must-link), ``different`` keeps them apart (a
cannot-link). A decision whose record has gone from the sources is kept in the store and
counted in the report as not applied.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..columns import RECORD_ID, SOURCE
from .learn import MIN_EACH, DecisionEstimator, compare_models
from .quality import PrecisionEstimate, audit_precision
from .store import load_decisions


@dataclass
class DecisionConstraints:
    """Standing decisions turned into record positions for one run."""

    must_link: np.ndarray  # (k, 2) positions of pairs decided ``same``
    cannot_link: np.ndarray  # (k, 2) positions of pairs decided ``different``
    deferred: int
    not_applied: int  # decisions naming a record that no longer exists
    estimator: DecisionEstimator | None  # set when there are enough decisions to re-estimate


@dataclass
class ReviewSummary:
    """What the run report says about review."""

    same: int
    different: int
    deferred: int
    not_applied: int
    labelled_same: int  # decided pairs that are candidate pairs of this run
    labelled_different: int
    relearned: bool
    comparison: pd.DataFrame | None
    audit: PrecisionEstimate | None
    min_each: int = MIN_EACH


def decision_constraints(workspace: str | Path, records: pd.DataFrame, min_each: int = MIN_EACH
                         ) -> DecisionConstraints:
    """Positions (in ``records``) of the pairs decided ``same`` and ``different``."""
    decisions = load_decisions(workspace)
    decisive = decisions[decisions["decision"].isin(["same", "different"])]
    position = pd.Series(np.arange(len(records)), index=pd.MultiIndex.from_arrays(
        [records[SOURCE].astype(str).to_numpy(), records[RECORD_ID].astype(str).to_numpy()]))
    position = position[~position.index.duplicated()]
    pos_a = position.reindex(pd.MultiIndex.from_frame(decisive[["source_a", "record_id_a"]].astype(str)))
    pos_b = position.reindex(pd.MultiIndex.from_frame(decisive[["source_b", "record_id_b"]].astype(str)))
    exists = pos_a.notna().to_numpy() & pos_b.notna().to_numpy()
    pairs = np.column_stack([pos_a.to_numpy()[exists], pos_b.to_numpy()[exists]]).astype(np.int64)
    same = (decisive["decision"] == "same").to_numpy()[exists]
    estimator = None
    if min(int(same.sum()), int((~same).sum())) >= min_each:
        estimator = DecisionEstimator(pd.DataFrame({"i": pairs[:, 0], "j": pairs[:, 1], "same": same}), min_each)
    return DecisionConstraints(
        must_link=pairs[same].reshape(-1, 2), cannot_link=pairs[~same].reshape(-1, 2),
        deferred=int((decisions["decision"] == "defer").sum()), not_applied=int((~exists).sum()),
        estimator=estimator,
    )


def summarise_review(workspace: str | Path, constraints: DecisionConstraints, scored: pd.DataFrame,
                     thresholds: dict[str, float], field_types: dict[str, str]) -> ReviewSummary:
    """Counts of applied decisions, the model comparison (if re-estimated) and the audit estimate."""
    est = constraints.estimator
    comparison = compare_models(scored, est, thresholds, field_types) if est is not None else None
    return ReviewSummary(
        same=len(constraints.must_link), different=len(constraints.cannot_link), deferred=constraints.deferred,
        not_applied=constraints.not_applied,
        labelled_same=est.labelled_same if est else 0, labelled_different=est.labelled_different if est else 0,
        relearned=comparison is not None, comparison=comparison, audit=audit_precision(workspace),
    )
