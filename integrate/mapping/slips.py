"""Unit slips per row: ``fix_unit_slips: true`` on a quantity column.

Some rows of a column are written in another unit than the one declared (centimetres typed into
an inches column). ``check`` finds them as values outside the field's plausible ``range`` that a
known unit factor brings back. With ``fix_unit_slips: true``, a row whose value is out of range
in the declared unit but in range read in another common unit of the same dimension is converted
from that unit; where several units would fit, the one putting the value nearest
the middle of the range (on a log scale) is used, and where none fits the row is left as it is
(out of range, for ``check`` to show). When more than a fifth of the column is out of range the
declared unit itself is wrong: nothing is converted, and ``check`` names the factor. Every
converted row is named in the canonical records'
``UNIT_FIXES`` column ("height_cm: read as cm, not in"), which the outputs can carry as provenance.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pint

from .factors import _COMMON_UNITS, unit_label
from .units import unit_registry

UNIT_FIXES = "_unit_fixes"  # canonical records: the fields whose unit was corrected in this row, and how
MAX_SLIP_SHARE = 0.2  # above this share of a column out of range, the column's unit is wrong, not a few rows


def _factor(unit: str, target: str) -> float | None:
    try:
        return float(unit_registry().Quantity(1.0, unit).to(target).magnitude)
    except pint.DimensionalityError:
        return None


def fix_slips(converted: pd.Series, declared: str, target: str, bounds: tuple[float, float]
              ) -> tuple[pd.Series, pd.Series]:
    """Values with slipped rows reconverted, and each fixed row's other unit (NA elsewhere).

    ``converted`` holds the values converted from ``declared`` to ``target``.

    Example:
        >>> cm = pd.Series([436.88, np.nan] + [172.72] * 8)  # one row of ten typed in centimetres
        >>> fixed, units = fix_slips(cm, "inch", "centimeter", (100, 230))
        >>> fixed.round(2).tolist()[:3], units.tolist()[:3]
        ([172.0, nan, 172.72], ['centimeter', <NA>, <NA>])
    """
    low, high = bounds
    own = _factor(declared, target)
    units = pd.Series(pd.NA, index=converted.index, dtype="string")
    if not own:
        return converted, units
    outside = converted.notna() & ~converted.between(low, high)
    if not outside.any() or outside.sum() > MAX_SLIP_SHARE * converted.notna().sum():
        return converted, units  # none, or so many that the declared unit is wrong (check names the factor)
    raw = converted[outside] / own
    middle = math.sqrt(low * high) if low > 0 else (low + high) / 2
    best = pd.Series(np.nan, index=raw.index)
    best_unit = pd.Series(pd.NA, index=raw.index, dtype="string")
    best_gap = pd.Series(np.inf, index=raw.index)
    for unit in _COMMON_UNITS:
        if unit == declared:
            continue
        factor = _factor(unit, target)
        if factor is None:
            continue
        value = raw * factor
        fits = value.between(low, high)
        gap = (np.log(value.where(value > 0) / middle).abs() if middle > 0 else (value - middle).abs()).fillna(np.inf)
        better = fits & (gap < best_gap)
        best, best_unit, best_gap = best.mask(better, value), best_unit.mask(better, unit), best_gap.mask(better, gap)
    found = best.notna()
    out = converted.copy()
    out[found[found].index] = best[found]
    units[found[found].index] = best_unit[found]
    return out, units


def describe(field: str, declared: str, units: pd.Series) -> pd.Series:
    """The provenance text of each fixed row ('height_cm: read as centimetres (cm), not inches (in)')."""
    labels = {u: unit_label(u) for u in units.dropna().unique()}
    text = units.map(labels).astype("string")
    return (f"{field}: read as " + text + f", not {unit_label(declared)}").astype("string")
