"""The local engine: blocking, comparison (in memory-sized chunks) and scoring in this process."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from ..block import BlockingReport, block
from ..compare import compare_in_chunks
from ..incremental import Reuse
from ..mapping.spec import BlockingRule, CanonicalSchema
from ..score import ScoreModel, score


def _quiet(_: str) -> None:
    return None


class LocalEngine:
    name = "local"

    def block_compare_score(self, prepared: pd.DataFrame, canonical: CanonicalSchema, rules: list[BlockingRule], *,
                            group_codes: np.ndarray | None, order_columns: list[str],
                            progress: Callable[[str], None] = _quiet,
                            estimator: Callable[..., ScoreModel] | None = None,
                            reuse: Reuse | None = None, model: ScoreModel | None = None
                            ) -> tuple[pd.DataFrame, BlockingReport, ScoreModel]:
        """``reuse``: stored grades of pairs an earlier run compared (incremental.py); ``model``:
        score with it instead of estimating one."""
        pairs, blocking = block(prepared, rules, groups=None if group_codes is None else pd.Series(group_codes),
                                max_block_size=canonical.max_block_size, order_columns=order_columns)
        progress("compare")
        count = getattr(progress, "count", None)
        if reuse is None:
            grades = compare_in_chunks(prepared, pairs, canonical, count=count)
        else:
            grades = compare_with_reuse(prepared, pairs, canonical, reuse, count)
        progress("score")
        scored, model = score(prepared, pairs, canonical, groups=group_codes, grades=grades, estimator=estimator,
                              model=model)
        return scored, blocking, model


def compare_with_reuse(prepared: pd.DataFrame, pairs: pd.DataFrame, canonical: CanonicalSchema, reuse: Reuse,
                       count: Callable[[int, int, str], None] | None = None) -> pd.DataFrame:
    """Grades of every pair: stored where ``reuse`` holds them, compared for the rest."""
    found, stored = reuse.split(pairs["i"].to_numpy(), pairs["j"].to_numpy())
    fresh = compare_in_chunks(prepared, pairs[~found], canonical, count=count)
    columns = list(fresh.columns)
    if found.any() and reuse.fields != columns:
        raise ValueError(f"stored grades hold fields {reuse.fields}, this run compares {columns}")
    out = np.empty((len(pairs), len(columns)), np.int8)
    out[~found] = fresh.to_numpy(np.int8)
    out[found] = stored
    reuse.reused, reuse.compared = int(found.sum()), int((~found).sum())
    return pd.DataFrame({c: out[:, k] for k, c in enumerate(columns)}, index=pairs.index)
