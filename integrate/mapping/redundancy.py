"""Columns of one source that say the same thing twice, so the mapping can ignore one of them.

Numeric columns are redundant when one is a fixed multiple of the other (height in cm and in
inches) or they are perfectly correlated (a temperature in °C and °F). Categorical columns
are redundant when each determines the other (a code and its label).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..columns import ROW

MIN_ROWS = 10  # rows with both values present before a pair is judged
NUMERIC_SHARE = 0.95  # share of a column's values that must read as numbers to treat it as numeric
RATIO_TOLERANCE = 0.01  # a fixed ratio may wobble by 1 % (values are rounded in exports)
CORRELATION = 0.999  # |Pearson r| at or above this: one column is a linear function of the other
MAX_CATEGORIES = 200  # more distinct values than this: not a categorical column


@dataclass(frozen=True)
class RedundantPair:
    first: str
    second: str
    kind: str  # "fixed_ratio", "correlated" or "same_categories"
    detail: str


def _numbers(raw: pd.DataFrame) -> pd.DataFrame:
    """Columns that read as plain numbers, as float64 (once per distinct value)."""
    out: dict[str, pd.Series] = {}
    for column in raw.columns:
        if column == ROW:
            continue
        text = raw[column].astype("string").str.strip()
        present = text.notna()
        if present.sum() < MIN_ROWS:
            continue
        distinct = text[present].drop_duplicates()
        parsed = pd.to_numeric(distinct.str.replace(",", "", regex=False), errors="coerce")
        if parsed.notna().mean() < NUMERIC_SHARE or parsed.nunique() < 3:
            continue
        # through a float64 lookup, not .astype on the mapped text: a value that does not read as a
        # number must become NaN, never a pandas NA that float() refuses
        lookup = pd.Series(parsed.to_numpy(dtype="float64", na_value=np.nan), index=distinct.to_numpy(dtype=object))
        values = lookup.reindex(text.to_numpy(dtype=object, na_value=None)).to_numpy(dtype="float64")
        out[str(column)] = pd.Series(values, index=raw.index)
    return pd.DataFrame(out, index=raw.index)


def _numeric_pairs(numbers: pd.DataFrame) -> list[RedundantPair]:
    found: list[RedundantPair] = []
    if numbers.shape[1] < 2:
        return found
    corr = numbers.corr(min_periods=MIN_ROWS).to_numpy()
    columns = list(numbers.columns)
    for i, a in enumerate(columns):
        for j in range(i + 1, len(columns)):
            b = columns[j]
            if not (np.isfinite(corr[i, j]) and abs(corr[i, j]) >= 0.99):
                continue  # a fixed ratio is a perfect correlation: only near-perfect pairs are looked at
            both = numbers[[a, b]].dropna()
            both = both[(both[a] != 0) & (both[b] != 0)]
            if len(both) < MIN_ROWS:
                continue
            ratio = (both[a] / both[b]).to_numpy()
            middle = float(np.median(ratio))
            if middle != 0 and np.mean(np.abs(ratio / middle - 1) <= RATIO_TOLERANCE) >= 0.99:
                found.append(RedundantPair(a, b, "fixed_ratio", f"'{a}' is {middle:.5g} x '{b}'"))
            elif np.isfinite(corr[i, j]) and abs(corr[i, j]) >= CORRELATION:
                found.append(RedundantPair(a, b, "correlated", f"correlation {corr[i, j]:.4f}"))
    return found


def _categorical_pairs(raw: pd.DataFrame) -> list[RedundantPair]:
    columns: list[str] = []
    distinct_counts: dict[str, int] = {}
    for column in raw.columns:
        if column == ROW:
            continue
        values = raw[column].dropna()
        distinct = values.nunique()
        if len(values) >= MIN_ROWS and 2 <= distinct <= MAX_CATEGORIES and distinct <= len(values) / 2:
            columns.append(str(column))
            distinct_counts[str(column)] = distinct
    found: list[RedundantPair] = []
    for i, a in enumerate(columns):
        for b in columns[i + 1:]:
            if distinct_counts[a] != distinct_counts[b]:
                continue  # columns that determine each other have as many distinct values (cheap test first)
            both = raw[[a, b]].dropna()
            if len(both) < MIN_ROWS:
                continue
            a_to_b = both.groupby(a, sort=False)[b].nunique().max() == 1
            b_to_a = both.groupby(b, sort=False)[a].nunique().max() == 1
            if a_to_b and b_to_a:
                found.append(RedundantPair(a, b, "same_categories",
                                           f"{both[a].nunique()} values, each paired with exactly one of the other"))
    return found


def redundant_columns(raw: pd.DataFrame) -> list[RedundantPair]:
    """Pairs of source columns where one can be derived from the other.

    Example:
        >>> raw = pd.DataFrame({"cm": [f"{170 + i}" for i in range(12)],
        ...                     "inches": [f"{(170 + i) / 2.54:.2f}" for i in range(12)],
        ...                     "code": ["F", "M"] * 6, "label": ["female", "male"] * 6})
        >>> [(p.first, p.second, p.kind) for p in redundant_columns(raw)]
        [('cm', 'inches', 'fixed_ratio'), ('code', 'label', 'same_categories')]
    """
    numeric = _numeric_pairs(_numbers(raw))
    taken = {(p.first, p.second) for p in numeric}
    categorical = [p for p in _categorical_pairs(raw) if (p.first, p.second) not in taken]
    return numeric + categorical
