"""Known factors that explain numbers off by a constant: mislabelled units, prefix slips, wrong currencies.

A factor ``k`` is *observed / true*: values converted under the declared unit come out ``k``
times what they should be. Inches declared as centimetres give k = 1/2.54 (the numbers are
read as cm, but each stands for 2.54 cm), so dividing the converted values by k repairs them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import pandas as pd
import pint

from ..errors import ConversionError
from .money import RatesTable
from .spec import CanonicalField, ColumnMap
from .units import resolve_unit, unit_registry

# Units a column is likely to be in instead of the declared one, per dimension (common practice).
_COMMON_UNITS = ("millimeter", "centimeter", "meter", "inch", "foot", "gram", "kilogram", "pound", "stone", "ounce")
_UNIT_LABELS = {
    "millimeter": "millimetres (mm)", "centimeter": "centimetres (cm)", "meter": "metres (m)",
    "inch": "inches (in)", "foot": "feet (ft)", "gram": "grams (g)", "kilogram": "kilograms (kg)",
    "pound": "pounds (lb)", "stone": "stone (st)", "ounce": "ounces (oz)",
}

# Factors that explain a constant ratio when no single declared unit narrows the choice.
# 1 in = 2.54 cm and 1 lb = 0.45359237 kg exactly (NIST SP 811, App. B.8); 1 st = 14 lb, 1 ft = 12 in.
GENERIC_FACTORS: dict[float, str] = {
    2.54: "inches and centimetres",
    1 / 0.45359237: "pounds and kilograms",
    1000.0: "a prefix slip (e.g. grams and kilograms, or thousands)",
    100.0: "a factor of 100 (e.g. centimetres and metres, or cents and whole units)",
    12.0: "inches and feet",
    14.0: "pounds and stone",
    10.0: "millimetres and centimetres",
}
MINOR_UNIT_SLIP = "amounts in minor units (e.g. cents or pence) read as whole units"


@dataclass(frozen=True)
class Explanation:
    """A factor (observed / true) and what would cause it."""

    factor: float
    cause: str

    def describe(self) -> str:
        return f"a factor of {format_factor(self.factor)} ({self.cause})"


def format_factor(k: float) -> str:
    """'2.54' for 2.54, '1/2.54' for 0.3937..., so a reader sees the familiar number.

    Example:
        >>> format_factor(1 / 2.54), format_factor(2.2046226218), format_factor(1000.0)
        ('1/2.54', '2.2046', '1000')
    """
    return f"{k:.5g}" if k >= 1 else f"1/{1 / k:.5g}"


def unit_label(unit: str) -> str:
    """'inches (in)' for pint's 'inch'; other units as pint names them."""
    return _UNIT_LABELS.get(unit, unit)


def ratio_text(ratio: float) -> str:
    """'about 2.54 times' or 'about 1/2.54 of' (a ratio in words).

    Example:
        >>> ratio_text(0.3939), ratio_text(2.2)
        ('about 1/2.54 of', 'about 2.2 times')
    """
    return f"about {ratio:.3g} times" if ratio >= 1 else f"about 1/{1 / ratio:.3g} of"


def undo_text(k: float) -> str:
    """How to undo a factor, in words a reader can check by hand.

    Example:
        >>> undo_text(1 / 2.54), undo_text(1000.0)
        ('multiplied by 2.54', 'divided by 1000')
    """
    return f"divided by {k:.5g}" if k >= 1 else f"multiplied by {1 / k:.5g}"


def _size_in(unit: str, target: str) -> float:
    return float(unit_registry().Quantity(1.0, unit).to(target).magnitude)


def unit_explanations(declared: str, canonical_unit: str) -> list[Explanation]:
    """The factors of values that were really in another common unit than ``declared``.

    Example:
        >>> [f"{e.factor:.4f} {e.cause}" for e in unit_explanations("cm", "cm") if "inch" in e.cause]
        ['0.3937 inches (in) declared as centimetres (cm)']
    """
    try:
        d, u = resolve_unit(declared), resolve_unit(canonical_unit)
        d_size = _size_in(d, u)
    except (ConversionError, pint.DimensionalityError):  # not units we can reason about
        return []
    out: list[Explanation] = []
    for true_unit in _COMMON_UNITS:
        if true_unit == d:
            continue
        try:
            true_size = _size_in(true_unit, u)
        except pint.DimensionalityError:  # another dimension: not a candidate
            continue
        label = _UNIT_LABELS.get(d, d)
        out.append(Explanation(d_size / true_size, f"{_UNIT_LABELS[true_unit]} declared as {label}"))
    return out


def typical_rates(rates: RatesTable | None, base: str) -> dict[str, float]:
    """Median rate (1 unit of the currency in ``base``) of every currency the table links to ``base``."""
    if rates is None:
        return {}
    codes = set(rates.quotes["from"]) | set(rates.quotes["to"])
    out: dict[str, float] = {base: 1.0}
    for code in sorted(codes - {base}):
        quotes = rates.quotes_for(code, base)
        if len(quotes):
            out[code] = float(pd.Series([float(r) for r in quotes["rate"]]).median())
    return out


def money_explanations(declared: str | None, base: str, rates: RatesTable | None) -> list[Explanation]:
    """Factors of amounts in another currency than declared (rates from the table), or in minor units."""
    typical = typical_rates(rates, base)
    out = [Explanation(100.0, MINOR_UNIT_SLIP)]
    if declared and declared in typical:
        for code, rate in typical.items():
            if code != declared:
                out.append(Explanation(typical[declared] / rate, f"amounts in {code} declared as {declared}"))
    else:
        codes = sorted(typical)
        for i, a in enumerate(codes):
            for b in codes[i + 1:]:
                out.append(Explanation(typical[a] / typical[b], f"the rate between {a} and {b} (wrong currency)"))
    return out


def explanations_for(spec: CanonicalField, entry: ColumnMap | None, base: str,
                     rates: RatesTable | None) -> list[Explanation]:
    """Candidate explanations for a column feeding a numeric field (the column's own entry, if any)."""
    if spec.type == "money":
        return money_explanations(entry.currency.upper() if entry and entry.currency else None, base, rates)
    found = unit_explanations(entry.unit, spec.unit or "") if entry and entry.unit else []
    generic = [Explanation(k, c) for k, c in GENERIC_FACTORS.items()]
    generic += [Explanation(1 / k, c) for k, c in GENERIC_FACTORS.items()]
    known = {round(math.log(e.factor), 2) for e in found}
    return found + [e for e in generic if round(math.log(e.factor), 2) not in known]


def closest(ratio: float, candidates: list[Explanation], tolerance: float = 0.05) -> Explanation | None:
    """The explanation whose factor is nearest ``ratio`` on a log scale, if within ``tolerance`` (5 %)."""
    if not candidates or not ratio > 0:
        return None
    best = min(candidates, key=lambda e: abs(math.log(ratio / e.factor)))
    return best if abs(math.log(ratio / best.factor)) <= math.log1p(tolerance) else None
