"""Units of measure: the spellings exports use, checked and converted with pint.

One pint registry serves the whole process. It is built on first use, not at import,
because building it reads pint's definition files (about a second).
"""

from __future__ import annotations

import functools
import re

import numpy as np
import pandas as pd
import pint

from integrate.errors import ConversionError

FAILURE_COLUMNS = ["index", "value", "reason", "message"]

# Spellings found in exports, looked up (lower-cased) before asking pint. Some are not
# pint names at all ('"', "kgs", "st"); others pint reads differently: "kilos" is a
# kilosecond to pint, and "st" is undefined.
_SPELLINGS: dict[str, str] = {
    **dict.fromkeys(['"', "″", "in", "inch", "inches"], "inch"),
    **dict.fromkeys(["'", "′", "ft", "foot", "feet"], "foot"),
    **dict.fromkeys(["cm", "centimetre", "centimetres", "centimeter", "centimeters"], "centimeter"),
    **dict.fromkeys(["mm", "millimetre", "millimetres", "millimeter", "millimeters"], "millimeter"),
    **dict.fromkeys(["m", "metre", "metres", "meter", "meters"], "meter"),
    **dict.fromkeys(
        ["kg", "kgs", "kilo", "kilos", "kilogram", "kilograms", "kilogramme", "kilogrammes"],
        "kilogram",
    ),
    **dict.fromkeys(["g", "gr", "gram", "grams", "gramme", "grammes"], "gram"),
    **dict.fromkeys(["lb", "lbs", "pound", "pounds"], "pound"),
    **dict.fromkeys(["oz", "ounce", "ounces"], "ounce"),
    # 1 stone = 14 lb (pint's definition too)
    **dict.fromkeys(["st", "stone", "stones"], "stone"),
}

_COMMON_CHOICES = "cm, m, mm, in, ft, kg, g, lb, oz, st"

# A plain decimal number, optionally with comma thousands separators, then an optional unit.
_NUMBER = re.compile(
    r"^\s*(?P<number>[+-]?(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d*)?(?:[eE][+-]?\d+)?"
    r"|[+-]?\.\d+(?:[eE][+-]?\d+)?)\s*(?P<unit>\D.*?)?\s*$",
    re.ASCII,
)


@functools.cache
def unit_registry() -> pint.UnitRegistry:
    """The process-wide pint registry (built on first call)."""
    return pint.UnitRegistry()


def resolve_unit(text: str) -> str:
    """The pint name of a unit as exports spell it (case-insensitive, trimmed).

    Raises:
        ConversionError: ``unknown_unit`` when neither the known spellings nor pint know it.

    Example:
        >>> resolve_unit(" Inches ")
        'inch'
        >>> resolve_unit("KGS")
        'kilogram'
        >>> resolve_unit("st")
        'stone'
    """
    unit = _lookup_unit(text)
    if unit is None:
        raise ConversionError(
            f"unknown unit '{text}'",
            value=text,
            reason="unknown_unit",
            hint=f"use a unit such as {_COMMON_CHOICES}, or any unit name pint knows",
        )
    return unit


@functools.lru_cache(maxsize=4096)
def _lookup_unit(text: str) -> str | None:
    """pint name of ``text``, or None; cached because a unit column repeats few texts."""
    if not isinstance(text, str):
        return None
    key = text.strip()
    key = key[:-1] if len(key) > 1 and key.endswith(".") else key  # "lbs.", "in."
    if not key:
        return None
    if key.lower() in _SPELLINGS:
        return _SPELLINGS[key.lower()]
    registry = unit_registry()
    for candidate in dict.fromkeys([key, key.lower()]):  # pint is case-sensitive: "mL", "degC"
        try:
            return str(registry.parse_units(candidate))
        # pint's expression parser raises many unrelated types on malformed text
        # (TokenError, AssertionError, ZeroDivisionError...): any of them means "not a unit"
        except Exception:
            continue
    return None


def _dimension(unit: str) -> str:
    return str(unit_registry().get_dimensionality(unit))


def check_compatible(from_unit: str, to_unit: str) -> None:
    """Raise unless ``from_unit`` converts to ``to_unit`` (same dimension).

    Raises:
        ConversionError: ``unknown_unit`` for either name, ``incompatible_unit`` when the
            dimensions differ.

    Example:
        >>> check_compatible("lb", "kg")
        >>> check_compatible("lb", "cm")
        Traceback (most recent call last):
        ...
        integrate.errors.ConversionError: cannot convert 'lb' ([mass]) to 'cm' ([length]) (hint: ...)
    """
    source, target = resolve_unit(from_unit), resolve_unit(to_unit)
    if _dimension(source) != _dimension(target):
        raise ConversionError(
            f"cannot convert '{from_unit}' ({_dimension(source)}) to '{to_unit}' ({_dimension(target)})",
            value=from_unit,
            reason="incompatible_unit",
            hint=f"the values must be measured in a unit of {_dimension(target)}",
        )


def convert_quantity(
    values: pd.Series, from_unit: str | pd.Series, to_unit: str
) -> tuple[pd.Series, pd.DataFrame]:
    """Convert numbers (or number texts) from ``from_unit`` to ``to_unit``.

    Texts may use comma thousands separators ("1,234.5") and may end with the row's own
    unit ("172 cm" in a cm column); a different unit there is a failure, not a guess.

    Args:
        values: numbers or texts.
        from_unit: one unit for all rows, or a Series holding each row's unit text.
        to_unit: the unit wanted.

    Returns:
        The converted values (float64, NaN where missing or failed, aligned with ``values``)
        and a failures frame with columns index, value, reason, message; ``index`` is the
        label of the failing row. Reasons: ``bad_number``, ``unknown_unit``,
        ``incompatible_unit``, ``missing_unit``, ``unit_mismatch``.

    Raises:
        ConversionError: ``to_unit`` or a single ``from_unit`` is unknown or incompatible.

    Example:
        >>> heights = pd.Series(["68", "1,000", "5.5 in", None, "tall"])
        >>> cm, failures = convert_quantity(heights, "inches", "cm")
        >>> cm.round(2).tolist()
        [172.72, 2540.0, 13.97, nan, nan]
        >>> failures[["index", "value", "reason"]].values.tolist()
        [[4, 'tall', 'bad_number']]
    """
    target = resolve_unit(to_unit)
    target_dimension = _dimension(target)
    if isinstance(from_unit, str):
        check_compatible(from_unit, to_unit)
        unit_texts = pd.Series(from_unit, index=values.index, dtype=object)
    else:
        unit_texts = from_unit.reindex(values.index).astype(object)
        unit_texts = unit_texts.mask(unit_texts.notna() & _is_blank(unit_texts))
    units = unit_texts.map(_distinct_units(unit_texts))
    numbers, suffix_units = _parse_numbers(values)

    present = values.notna() & ~_is_blank(values)
    bad_number = present & numbers.isna()
    no_unit = present & ~bad_number & unit_texts.isna()
    unknown = present & ~bad_number & unit_texts.notna() & units.isna()
    mismatch = present & ~bad_number & units.notna() & suffix_units.notna() & (suffix_units != units)
    usable = present & ~bad_number & units.notna() & ~mismatch
    dimensions = units.map({u: _dimension(u) for u in pd.unique(units[usable])})
    incompatible = usable & (dimensions != target_dimension)
    failures = [
        _failures(values, bad_number, "bad_number", "is not a number"),
        _failures(values, no_unit, "missing_unit", "has no unit"),
        _failures(
            values,
            unknown,
            "unknown_unit",
            "has unknown unit '" + unit_texts[unknown].astype(str) + f"' (expected one of: {_COMMON_CHOICES})",
        ),
        _failures(
            values,
            mismatch,
            "unit_mismatch",
            "says " + suffix_units[mismatch].astype(str) + " but the unit given for it is "
            + units[mismatch].astype(str),
        ),
        _failures(
            values,
            incompatible,
            "incompatible_unit",
            "is in " + units[incompatible].astype(str) + " (" + dimensions[incompatible].astype(str)
            + f"), which does not convert to {target} ({target_dimension})",
        ),
    ]

    result = pd.Series(np.nan, index=values.index, dtype="float64", name=values.name)
    convertible = usable & ~incompatible
    for unit in pd.unique(units[convertible]):
        rows = convertible & (units == unit)
        result[rows] = _convert_array(numbers[rows].to_numpy(dtype="float64"), unit, target)
    return result, _concat_failures(failures)


def _convert_array(numbers: np.ndarray, unit: str, target: str) -> np.ndarray:
    registry = unit_registry()
    if registry.Quantity(0.0, unit).to(target).magnitude == 0:
        # a pure scale: one factor for the whole group
        return numbers * registry.Quantity(1.0, unit).to(target).magnitude
    # an offset scale (degC, degF): pint applies scale and offset to the array
    return np.asarray(registry.Quantity(numbers, unit).to(target).magnitude, dtype="float64")


def _distinct_units(texts: pd.Series) -> dict[object, str | None]:
    """pint name of every distinct unit text (None when unknown)."""
    return {text: _lookup_unit(text) for text in texts.dropna().drop_duplicates()}


def _is_blank(values: pd.Series) -> pd.Series:
    text = values.astype("string")
    return text.str.strip().eq("").fillna(False).astype(bool)


def _parse_numbers(values: pd.Series) -> tuple[pd.Series, pd.Series]:
    """Each value's number (NaN if none) and the pint name of a unit written after it.

    Computed once per distinct value; a value ending in an unknown unit is not a number.
    """
    if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values.dtype):
        return values.astype("float64"), pd.Series(None, index=values.index, dtype=object)
    distinct = values[values.notna()].drop_duplicates()
    parsed = {value: _parse_number(value) for value in distinct}
    numbers = values.map({value: number for value, (number, _) in parsed.items()})
    suffixes = values.map({value: unit for value, (_, unit) in parsed.items() if unit is not None})
    return numbers.astype("float64"), suffixes.astype(object)


def _parse_number(value: object) -> tuple[float, str | None]:
    """(number, pint unit name or None) of one value; NaN when it is not a number."""
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        return float(value), None
    found = _NUMBER.match(str(value))
    if not found:
        return np.nan, None
    number = float(found.group("number").replace(",", ""))
    if not np.isfinite(number):  # "1e999"
        return np.nan, None
    if found.group("unit") is None:
        return number, None
    unit = _lookup_unit(found.group("unit"))
    return (np.nan, None) if unit is None else (number, unit)


def _failures(values: pd.Series, mask: pd.Series, reason: str, message: str | pd.Series) -> pd.DataFrame:
    """Failure rows for ``values[mask]``; ``message`` follows the quoted value."""
    bad = values[mask]
    text = bad.astype(str)
    return pd.DataFrame(
        {
            "index": bad.index,
            "value": text.to_numpy(),
            "reason": reason,
            "message": ("'" + text + "' " + message).to_numpy(dtype=object),
        },
        columns=FAILURE_COLUMNS,
    )


def _concat_failures(parts: list[pd.DataFrame]) -> pd.DataFrame:
    parts = [p for p in parts if len(p)]
    if not parts:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in FAILURE_COLUMNS})
    return pd.concat(parts, ignore_index=True)
