"""Per-group work without a Python call per group: text joined per group (resolve, the change
summary) and each group's record with the smallest key (identical records, stable IDs)."""

from __future__ import annotations

import numpy as np
import pandas as pd


def join_by_group(labels: pd.Series, groups: pd.Series, sep: str = "; ", *, sort_labels: bool = False) -> pd.Series:
    """``labels.groupby(groups).agg(sep.join)`` (each group's labels sorted first with
    ``sort_labels``), indexed by the sorted group keys.

    The labels are put in group order, each followed by the separator, and each group's run is
    concatenated by ``np.add.reduceat``; the last separator is cut off.

    Example:
        >>> join_by_group(pd.Series(["b", "a", "c"]), pd.Series(["x", "x", "y"]), " ", sort_labels=True).to_dict()
        {'x': 'a b', 'y': 'c'}
    """
    if len(labels) == 0:
        return pd.Series([], index=pd.Index([], name=groups.name), dtype=object)
    codes, keys = pd.factorize(groups, sort=True)
    values = labels.to_numpy(dtype=object)
    if sort_labels:
        order = np.lexsort((pd.factorize(values, sort=True)[0], codes))
    else:
        order = np.argsort(codes, kind="stable")
    runs = codes[order]
    starts = np.flatnonzero(np.r_[True, runs[1:] != runs[:-1]])
    joined = np.add.reduceat(values[order] + sep, starts)
    text = pd.Series(joined, dtype=object).str[:-len(sep)] if sep else pd.Series(joined, dtype=object)
    return pd.Series(text.to_numpy(), index=pd.Index(keys[runs[starts]], name=groups.name))


def smallest_in_group(keys: np.ndarray, groups: np.ndarray) -> np.ndarray:
    """Per group code (0..k-1), the position of its member with the smallest key (keys are
    distinct; compared as Python objects, so text sorts as ``min`` would); -1 for a code no
    record has."""
    n = len(keys)
    order = np.argsort(np.asarray(keys, dtype=object), kind="stable")
    rank = np.empty(n, np.int64)
    rank[order] = np.arange(n)
    best = np.full(int(groups.max(initial=-1)) + 1, n, np.int64)
    np.minimum.at(best, groups, rank)
    return np.where(best < n, order[np.minimum(best, max(n - 1, 0))], -1)
