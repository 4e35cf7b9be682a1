"""The matching half of the pipeline on canonical records: standardise, block, compare, score, cluster."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import pandas as pd

from .block import BlockingReport, block, default_rules
from .cluster import Split, cluster
from .compare import compare
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
                  progress: Progress = _quiet) -> MatchResult:
    """Find and cluster duplicates among canonical records (positions 0..n-1)."""
    records = records.reset_index(drop=True)
    progress("standardise")
    prepared = standardise(records, canonical, regions)
    groups = records["_source"].to_numpy() if across_sources_only else None
    group_codes = pd.factorize(records["_source"])[0] if across_sources_only else None
    progress("block")
    rules = list(canonical.blocking) or default_rules(canonical)
    pairs, blocking = block(prepared, rules, groups=None if groups is None else pd.Series(groups),
                            max_block_size=canonical.max_block_size, canonical=canonical)
    progress("compare")
    grades = compare(prepared, pairs, canonical)
    progress("score")
    scored, model = score(prepared, pairs, canonical, groups=group_codes, grades=grades)
    progress("cluster")
    entities, splits = cluster(records, scored)
    return MatchResult(prepared, scored, entities, blocking, model, splits)


