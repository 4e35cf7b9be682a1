"""The matching half of the pipeline on canonical records: standardise, block, compare, score, cluster."""

from __future__ import annotations

from collections.abc import Callable, Collection
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .block import BlockingReport, block, default_rules
from .cluster import Split, cluster
from .compare import compare_in_chunks
from .mapping.spec import CanonicalSchema
from .score import ScoreModel, score
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


def _quiet(_: str) -> None:
    return None


def match_records(records: pd.DataFrame, canonical: CanonicalSchema, *,
                  regions: dict[str, str | None] | None = None, across_sources_only: bool = False,
                  progress: Progress = _quiet, must_link: np.ndarray | None = None,
                  cannot_link: np.ndarray | None = None, estimator: Callable[..., ScoreModel] | None = None,
                  one_per_person: Collection[str] = ()) -> MatchResult:
    """Find and cluster duplicates among canonical records (positions 0..n-1).

    ``must_link`` / ``cannot_link`` are (k, 2) arrays of record positions that reviewers decided
    are the same / different people; ``estimator`` replaces the scorer's EM (see ``score``);
    ``one_per_person`` names sources that hold at most one record per person (see ``cluster``).
    """
    records = records.reset_index(drop=True)
    progress("standardise")
    count = getattr(progress, "count", None)
    if count is not None:
        count(0, len(records), "records")
    prepared = standardise(records, canonical, regions)
    group_codes = pd.factorize(records["_source"])[0] if across_sources_only else None
    progress("block")
    if count is not None:
        count(len(records), len(records), "records")
    rules = list(canonical.blocking) or default_rules(canonical)
    pairs, blocking = block(prepared, rules, groups=None if group_codes is None else pd.Series(group_codes),
                            max_block_size=canonical.max_block_size,
                            order_columns=[n for n, f in canonical.fields.items() if f.is_compared()])
    progress("compare")
    grades = compare_in_chunks(prepared, pairs, canonical, count=getattr(progress, "count", None))
    progress("score")
    scored, model = score(prepared, pairs, canonical, groups=group_codes, grades=grades, estimator=estimator)
    progress("cluster")
    entities, splits = cluster(records, scored, must_link=must_link, cannot_link=cannot_link,
                               one_per_person=one_per_person)
    return MatchResult(prepared, scored, entities, blocking, model, splits)


