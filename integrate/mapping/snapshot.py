"""A compact, storable profile of each source column, taken on every run to spot export drift later.

The profile extends ``profile.py``'s (kind, share empty, distinct count, pattern shares, date
layouts) with what a month-to-month comparison needs: the most common values with their
counts, numeric quantiles, string lengths, value shapes (``Aa`` for 'Smith', ``9/9/9`` for
'03/04/2026') and the unit, currency and date format the mapping declared when it was taken.
Everything is a plain JSON-ready dict, one per column, computed once per distinct value.

Example:
    >>> snap = snapshot_column(pd.Series(["12", "15", "15", None], name="height"))
    >>> snap["kind"], snap["empty"], snap["distinct"], snap["top"][0], snap["quantiles"]["q50"]
    ('number', 1, 2, ['15', 2], 15.0)
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..columns import ROW
from .money import parse_amounts
from .profile import profile_column
from .spec import ColumnMap, SourceMapping

TOP_VALUES = 30  # most common values kept per column (enough for code columns; names are sampled)
TOP_SHAPES = 8  # most common value shapes kept per column
QUANTILES = (0.05, 0.25, 0.5, 0.75, 0.95)
PATTERN_SAMPLE = 200  # values whose patterns and date layouts are tried (shares to within a few points)


def _weighted_quantiles(numbers: np.ndarray, weights: np.ndarray) -> dict[str, float]:
    order = np.argsort(numbers, kind="mergesort")
    values, w = numbers[order], weights[order]
    cumulative = np.cumsum(w) / w.sum()
    return {f"q{round(q * 100):02d}": float(values[min(np.searchsorted(cumulative, q), len(values) - 1)])
            for q in QUANTILES}


def value_shapes(distinct: pd.Series) -> pd.Series:
    """Each value's shape: runs of capitals -> 'A', small letters -> 'a', digits -> '9'.

    Example:
        >>> value_shapes(pd.Series(["Smith", "03/04/2026", "AB12 3CD"])).tolist()
        ['Aa', '9/9/9', 'A9 9A']
    """
    texts = distinct.astype(str).tolist()
    if not texts:
        return pd.Series([], index=distinct.index, dtype=object)
    # All values as one array of code points, classified once per distinct character: the same
    # shapes as the four regex passes [A-Z]+ -> A, [a-z]+ -> a, \d+ -> 9, ([^\w])\1+ -> \1, without
    # a regex call per value.
    codes = np.frombuffer("".join(texts).encode("utf-32-le", "surrogatepass"), dtype=np.uint32)
    lengths = np.fromiter(map(len, texts), dtype=np.int64, count=len(texts))
    ends = np.cumsum(lengths)
    starts = ends - lengths
    points, inverse = np.unique(codes, return_inverse=True)
    shape_points, collapsible = _shape_classes(points)
    shaped = shape_points[inverse]
    # a character repeating its class (or the same non-word character) right before it is dropped
    drop = np.zeros(len(codes), dtype=bool)
    drop[1:] = (shaped[1:] == shaped[:-1]) & collapsible[inverse][1:]
    drop[starts[lengths > 0]] = False  # never across the boundary of two values
    kept = np.concatenate(([0], np.cumsum(~drop)))
    new_ends = kept[ends]
    new_starts = kept[starts]
    text = shaped[~drop].astype("<u4").tobytes().decode("utf-32-le", "surrogatepass")
    return pd.Series([text[a:b] for a, b in zip(new_starts.tolist(), new_ends.tolist())],
                     index=distinct.index, dtype=object)


def _shape_classes(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each code point's shape character, and whether a run of it collapses into one.

    ASCII capitals -> 'A', ASCII small letters -> 'a', decimal digits (``\\d``: any script) -> '9';
    other characters stay, and runs collapse for the three classes and for non-word characters
    (``\\w`` is ``str.isalnum()`` or ``_``), as in Python's ``re``.
    """
    shape = points.astype(np.uint32)
    collapsible = np.zeros(len(points), dtype=bool)
    for k, point in enumerate(points.tolist()):  # once per distinct character
        char = chr(point)
        if "A" <= char <= "Z":
            shape[k], collapsible[k] = ord("A"), True
        elif "a" <= char <= "z":
            shape[k], collapsible[k] = ord("a"), True
        elif char.isdecimal():
            shape[k], collapsible[k] = ord("9"), True
        else:
            collapsible[k] = not (char.isalnum() or char == "_")
    return shape, collapsible


def declared_entry(entry: ColumnMap | None) -> dict[str, Any]:
    """What the mapping says of a column when the profile is taken (unit, currency, format...)."""
    if entry is None:
        return {"mapped": False}
    return {"mapped": not entry.ignore, "field": entry.field, "unit": entry.unit, "currency": entry.currency,
            "format": entry.format, "per_row_unit": bool(entry.unit_column or entry.currency_column),
            "value_map": entry.values is not None}


def snapshot_column(values: pd.Series, entry: ColumnMap | None = None, *, patterns: bool = True) -> dict[str, Any]:
    """The storable profile of one column of text values (see the module docstring).

    ``patterns=False`` leaves out kind, pattern shares, date layouts and quantiles (the costly part:
    ``profile.py`` tries every date layout), for columns nothing reads.
    """
    text = values.astype("string").str.strip()
    present = text[text.notna() & text.ne("")]
    counts = present.value_counts()
    empty = len(values) - len(present)
    snap: dict[str, Any] = {
        "kind": "", "count": len(values), "empty": empty, "distinct": len(counts),
        "unique": empty == 0 and len(counts) == len(values) > 0,
        "top": [[str(v), int(n)] for v, n in counts.head(TOP_VALUES).items()], "shares": {}, "date_formats": {},
        "declared": declared_entry(entry),
    }
    if patterns:
        # kinds, pattern shares and date layouts from a seeded sample (profile.py tries every layout per
        # distinct value); counts, top values, lengths, shapes and quantiles from every value
        sample = values if len(values) <= PATTERN_SAMPLE else values.sample(PATTERN_SAMPLE, random_state=0)
        base = profile_column(sample)
        snap.update(kind=base.kind(), shares={k: round(v, 4) for k, v in base.shares.items()},
                    date_formats={k: round(v, 4) for k, v in base.date_formats.items()})
    if counts.empty:
        return snap
    distinct = pd.Series(counts.index.astype(str), dtype=object)
    weights = counts.to_numpy().astype("float64")
    lengths = distinct.str.len().to_numpy()
    snap["length"] = {"min": int(lengths.min()), "mean": round(float(np.average(lengths, weights=weights)), 2),
                      "max": int(lengths.max())}
    shapes = pd.Series(weights, index=value_shapes(distinct).to_numpy()).groupby(level=0).sum()
    shapes = (shapes / weights.sum()).sort_values(ascending=False, kind="mergesort").head(TOP_SHAPES)
    snap["shapes"] = {str(k): round(float(v), 4) for k, v in shapes.items()}
    if snap["shares"].get("number", 0.0) >= 0.9:
        amounts, _ = parse_amounts(distinct)
        ok = amounts.notna().to_numpy()
        if ok.any():
            snap["quantiles"] = _weighted_quantiles(amounts.to_numpy()[ok], weights[ok])
    return snap


def snapshot_source(raw: pd.DataFrame, mapping: SourceMapping, *, unmentioned: bool = False
                    ) -> dict[str, dict[str, Any]]:
    """Column name -> profile, for every column of a source as read (mapped or not).

    Patterns are profiled for mapped columns, and with ``unmentioned`` also for columns the
    mapping does not mention (``check`` compares those with vanished ones); ignored columns get
    counts only.
    """
    maps = mapping.column_maps()

    def wanted(entry: ColumnMap | None) -> bool:
        return unmentioned if entry is None else not entry.ignore

    return {str(c): snapshot_column(raw[c], maps.get(str(c)), patterns=wanted(maps.get(str(c))))
            for c in raw.columns if c != ROW}
