"""The matching half of the pipeline on canonical records: standardise, block, compare, score, cluster."""

from __future__ import annotations

from collections.abc import Callable, Collection
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .block import BlockingReport, default_rules
from .cluster import Split, cluster
from .identical import find_identical
from .incremental import Reuse
from .mapping.spec import CanonicalSchema
from .score import ScoreModel, all_pairs_count
from .standardise import standardise

Progress = Callable[[str], None]


@dataclass
class MatchResult:
    prepared: pd.DataFrame
    pairs: pd.DataFrame  # scored candidate pairs
    entities: pd.DataFrame  # per record: entity_id, cluster_size, link_strength
    blocking: BlockingReport
    model: ScoreModel
    splits: list[Split]
    # per record, the position of the record that was matched for it: itself, or the identical
    # record of its source that stood for it (identical.py); copies have no candidate-pair rows
    copy_of: np.ndarray | None = None
    reuse: Reuse | None = None  # stored grades an incremental run used (counts filled in)


def _quiet(_: str) -> None:
    return None


def match_records(records: pd.DataFrame, canonical: CanonicalSchema, *,
                  regions: dict[str, str | None] | None = None, across_sources_only: bool = False,
                  progress: Progress = _quiet, must_link: np.ndarray | None = None,
                  cannot_link: np.ndarray | None = None, estimator: Callable[..., ScoreModel] | None = None,
                  one_per_person: Collection[str] = (), engine: object = None,
                  prepared: pd.DataFrame | None = None,
                  reuse: Callable[[pd.DataFrame, np.ndarray], Reuse] | None = None,
                  model: ScoreModel | None = None) -> MatchResult:
    """Find and cluster duplicates among canonical records (positions 0..n-1).

    ``must_link`` / ``cannot_link`` are (k, 2) arrays of record positions that reviewers decided
    are the same / different people; ``estimator`` replaces the scorer's EM (see ``score``);
    ``one_per_person`` names sources that hold at most one record per person (see ``cluster``);
    ``engine`` runs blocking, comparison and scoring (``integrate.engine``; default: this process).
    An incremental run (incremental.py) passes the standard values it already has (``prepared``),
    ``reuse`` (given the standard values and each record's representative, the stored grades
    still valid) and the earlier run's ``model``.
    """
    records = records.reset_index(drop=True)
    progress("standardise")
    count = getattr(progress, "count", None)
    if count is not None:
        count(0, len(records), "records")
    if prepared is None:
        prepared = standardise(records, canonical, regions)
    full_records, full_prepared = records, prepared
    # identical records: one representative is matched, its copies join its entity (identical.py)
    same = find_identical(records, prepared, [n for n, f in canonical.fields.items() if f.is_compared()],
                          one_per_person=one_per_person, must_link=must_link, cannot_link=cannot_link,
                          estimator=estimator)
    records, prepared, must_link, cannot_link = same.representatives(must_link, cannot_link)
    group_codes = pd.factorize(records["_source"])[0] if across_sources_only else None
    progress("block")
    if count is not None:
        count(len(full_records), len(full_records), "records")
    rules = list(canonical.blocking) or default_rules(canonical)
    if engine is None:
        from .engine.local import LocalEngine

        engine = LocalEngine()
    extra = {}
    if reuse is not None or model is not None:
        if getattr(engine, "name", "local") != "local":
            raise ValueError("incremental runs use the local engine")
        extra = {"reuse": None if reuse is None else reuse(full_prepared, same.copy_of), "model": model}
    scored, blocking, model = engine.block_compare_score(  # type: ignore[attr-defined]
        prepared, canonical, rules, group_codes=group_codes, progress=progress, estimator=estimator,
        order_columns=[n for n, f in canonical.fields.items() if f.is_compared()], **extra)
    progress("cluster")
    entities, splits = cluster(records, scored, must_link=must_link, cannot_link=cannot_link,
                               one_per_person=one_per_person)
    scored, entities, splits = same.expand(scored, entities, splits)
    if same.collapsed:
        blocking.identical_copies = same.collapsed
        blocking.all_pairs = all_pairs_count(
            len(full_records), pd.factorize(full_records["_source"])[0] if across_sources_only else None)
    return MatchResult(full_prepared, scored, entities, blocking, model, splits, same.copy_of,
                       extra.get("reuse"))


