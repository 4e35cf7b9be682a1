"""Quality estimated from review: precision of automatic links from a checked random sample.

The Wilson score interval (Wilson 1927, JASA 22:209–212; method 3 in Newcombe 1998, Stat. Med.
17:857–872) stays inside [0, 1] and keeps close to its nominal coverage for small samples and for
proportions near 0 or 1, where the plain normal interval fails; a sample of checked links usually
is small and its precision usually near 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .store import KEY_COLUMNS, DecisionStore, has_state, order_pairs

Z_95 = 1.959963984540054  # standard normal quantile for a two-sided 95 % interval (Φ⁻¹(0.975))
AUDIT_SEED = 20261203  # default seed for drawing audit samples


def wilson_interval(successes: int, n: int, z: float = Z_95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion.

    Example:
        >>> low, high = wilson_interval(81, 263)  # Newcombe (1998), Table I: 0.2553 to 0.3662
        >>> round(low, 4), round(high, 4)
        (0.2553, 0.3662)
    """
    if n <= 0:
        raise ValueError("a Wilson interval needs at least one observation")
    if not 0 <= successes <= n:
        raise ValueError(f"successes {successes} outside 0..{n}")
    p = successes / n
    z2 = z * z
    centre = p + z2 / (2 * n)
    spread = z * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    denominator = 1 + z2 / n
    return max(0.0, (centre - spread) / denominator), min(1.0, (centre + spread) / denominator)


@dataclass(frozen=True)
class PrecisionEstimate:
    """Precision of automatic links from the audit sample's decisions."""

    checked: int  # audited pairs decided same or different
    correct: int  # of which decided same
    drawn: int  # pairs in the audit sample
    low: float
    high: float

    @property
    def precision(self) -> float:
        return self.correct / self.checked


def draw_audit_sample(pairs: pd.DataFrame, n: int, seed: int = AUDIT_SEED,
                      exclude: pd.DataFrame | None = None) -> pd.DataFrame:
    """A seeded simple random sample of ``n`` automatic links (decision ``link``) not drawn before."""
    links = order_pairs(pairs[pairs["decision"] == "link"])
    if exclude is not None and len(exclude):
        seen = links[KEY_COLUMNS].merge(order_pairs(exclude[KEY_COLUMNS]).drop_duplicates(), how="left",
                                        on=KEY_COLUMNS, indicator=True)["_merge"].to_numpy() == "both"
        links = links[~seen]
    links = links.sort_values(KEY_COLUMNS, kind="mergesort")  # the draw must not depend on file order
    take = min(n, len(links))
    rows = np.random.default_rng(seed).choice(len(links), size=take, replace=False) if take else []
    return links.iloc[np.sort(rows)][KEY_COLUMNS + ["probability"]].reset_index(drop=True)


def audit_precision(workspace: str | Path) -> PrecisionEstimate | None:
    """Precision of automatic links estimated from the audit sample's decisions (None before any)."""
    if not has_state(workspace):
        return None
    store = DecisionStore.for_workspace(workspace)
    sample = store.audit_sample()
    if sample.empty:
        return None
    decided = store.decisions()
    checked = sample[KEY_COLUMNS].merge(decided[KEY_COLUMNS + ["decision"]], on=KEY_COLUMNS, how="inner")
    checked = checked[checked["decision"].isin(["same", "different"])]
    if checked.empty:
        return None
    correct = int((checked["decision"] == "same").sum())
    low, high = wilson_interval(correct, len(checked))
    return PrecisionEstimate(len(checked), correct, len(sample), low, high)
