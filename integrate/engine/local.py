"""The local engine: blocking, comparison (in memory-sized chunks) and scoring in this process."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from ..block import BlockingReport, block
from ..compare import compare_in_chunks
from ..mapping.spec import BlockingRule, CanonicalSchema
from ..score import ScoreModel, score


def _quiet(_: str) -> None:
    return None


class LocalEngine:
    name = "local"

    def block_compare_score(self, prepared: pd.DataFrame, canonical: CanonicalSchema, rules: list[BlockingRule], *,
                            group_codes: np.ndarray | None, order_columns: list[str],
                            progress: Callable[[str], None] = _quiet,
                            estimator: Callable[..., ScoreModel] | None = None
                            ) -> tuple[pd.DataFrame, BlockingReport, ScoreModel]:
        pairs, blocking = block(prepared, rules, groups=None if group_codes is None else pd.Series(group_codes),
                                max_block_size=canonical.max_block_size, order_columns=order_columns)
        progress("compare")
        grades = compare_in_chunks(prepared, pairs, canonical, count=getattr(progress, "count", None))
        progress("score")
        scored, model = score(prepared, pairs, canonical, groups=group_codes, grades=grades, estimator=estimator)
        return scored, blocking, model
