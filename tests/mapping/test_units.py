"""Units: exact factors from NIST SP 811, export spellings, errors, and a round-trip property."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.errors import ConversionError
from integrate.mapping.units import check_compatible, convert_quantity, resolve_unit


def _one(value: float, from_unit: str, to_unit: str) -> float:
    converted, failures = convert_quantity(pd.Series([value]), from_unit, to_unit)
    assert failures.empty
    return float(converted.iloc[0])


@pytest.mark.parametrize(
    ("from_unit", "to_unit", "expected"),
    [
        # 1 in = 0.0254 m exactly (NIST SP 811 (2008) B.8; international yard and pound agreement, 1959)
        ("in", "m", 0.0254),
        # 1 ft = 0.3048 m exactly (NIST SP 811 (2008) B.8)
        ("ft", "m", 0.3048),
        # 1 lb (avoirdupois) = 0.45359237 kg exactly (NIST SP 811 (2008) B.8; 1959 agreement)
        ("lb", "kg", 0.45359237),
        # 1 oz (avoirdupois) = 1/16 lb = 28.349523125 g exactly (NIST SP 811 (2008) B.8, derived from the pound)
        ("oz", "g", 28.349523125),
        # 1 stone = 14 lb = 14 x 0.45359237 kg = 6.35029318 kg (derived from the exact pound; stone = 14 lb is
        # common practice in UK and Irish exports)
        ("st", "kg", 6.35029318),
        # 1 US liquid gallon = 231 in^3 = 3.785411784 L exactly (NIST SP 811 (2008) B.8; NIST HB 44 App. C)
        ("gallon", "L", 3.785411784),
        # 1 m = 100 cm (SI prefix centi = 10^-2, NIST SP 811 (2008) table 5)
        ("m", "cm", 100.0),
    ],
)
def test_exact_factors(from_unit: str, to_unit: str, expected: float) -> None:
    assert math.isclose(_one(1.0, from_unit, to_unit), expected, rel_tol=1e-12)


def test_fahrenheit_has_an_offset() -> None:
    # t/degC = (t/degF - 32) / 1.8 (NIST SP 811 (2008) B.9): 212 degF = 100 degC, -40 degF = -40 degC
    converted, failures = convert_quantity(pd.Series([212.0, -40.0]), "degF", "degC")
    assert failures.empty
    assert converted.tolist() == pytest.approx([100.0, -40.0], rel=1e-12)


@pytest.mark.parametrize(
    ("spelling", "unit"),
    [
        ("in", "inch"), ("inch", "inch"), ("Inches", "inch"), ('"', "inch"),
        ("ft", "foot"), ("feet", "foot"), ("FOOT", "foot"), ("'", "foot"),
        ("cm", "centimeter"), ("centimetre", "centimeter"), ("centimeters", "centimeter"),
        ("mm", "millimeter"), ("m", "meter"), ("metres", "meter"),
        ("kg", "kilogram"), ("KGS", "kilogram"), ("kilo", "kilogram"), ("kilos", "kilogram"),
        ("kilograms", "kilogram"), ("g", "gram"), ("grams", "gram"),
        ("lb", "pound"), ("lbs", "pound"), ("lbs.", "pound"), ("Pounds", "pound"),
        ("oz", "ounce"), ("st", "stone"), ("stone", "stone"),
        (" mL ", "milliliter"),  # not in the spelling table: pint's own name, case kept
        ("degC", "degree_Celsius"),
    ],
)
def test_spellings(spelling: str, unit: str) -> None:
    assert resolve_unit(spelling) == unit


@pytest.mark.parametrize("text", ["bananas", "", "  ", "#", "kg)", "3 kg"])
def test_unknown_unit(text: str) -> None:
    with pytest.raises(ConversionError) as caught:
        resolve_unit(text)
    err = caught.value
    assert (err.reason, err.value) == ("unknown_unit", text)
    assert err.hint is not None and "kg" in err.hint and "cm" in err.hint


def test_incompatible_units() -> None:
    with pytest.raises(ConversionError) as caught:
        check_compatible("lbs", "cm")
    err = caught.value
    assert err.reason == "incompatible_unit"
    assert "'lbs'" in err.message and "[mass]" in err.message and "'cm'" in err.message and "[length]" in err.message
    with pytest.raises(ConversionError):
        convert_quantity(pd.Series(["1"]), "kg", "cm")


def test_values_text_and_failures() -> None:
    texts = ["68", "1,000", " 70 in", None, "", "tall", "5 ft", "1,00"]
    values = pd.Series(texts, index=range(10, 18))
    converted, failures = convert_quantity(values, "inch", "cm")
    assert converted.index.tolist() == values.index.tolist()
    # 1 in = 2.54 cm exactly (NIST SP 811 (2008) B.8)
    assert converted.loc[[10, 11, 12]].tolist() == pytest.approx([172.72, 2540.0, 177.8], rel=1e-12)
    assert converted.loc[[13, 14, 15, 16, 17]].isna().all()
    got = failures.set_index("index")[["value", "reason"]].to_dict("index")
    assert got == {
        15: {"value": "tall", "reason": "bad_number"},
        16: {"value": "5 ft", "reason": "unit_mismatch"},
        17: {"value": "1,00", "reason": "bad_number"},
    }
    assert list(failures.columns) == ["index", "value", "reason", "message"]


def test_per_row_units() -> None:
    values = pd.Series([1.0, 2.0, 3.0, 4.0, 5.0, np.nan])
    units = pd.Series(["kg", "lb", "stone", "parsec", None, "kg"])
    converted, failures = convert_quantity(values, units, "kg")
    # 1 lb = 0.45359237 kg, 1 stone = 14 lb (NIST SP 811 (2008) B.8; stone: common practice)
    assert converted.iloc[:3].tolist() == pytest.approx([1.0, 0.90718474, 3 * 6.35029318], rel=1e-12)
    assert converted.iloc[3:].isna().all()
    reasons = dict(zip(failures["index"], failures["reason"]))
    assert reasons == {3: "incompatible_unit", 4: "missing_unit"}


def test_per_row_unknown_unit() -> None:
    converted, failures = convert_quantity(pd.Series(["1", "2"]), pd.Series(["kg", "kgz"]), "g")
    assert converted.iloc[0] == 1000.0 and math.isnan(converted.iloc[1])
    assert failures[["index", "value", "reason"]].values.tolist() == [[1, "2", "unknown_unit"]]
    assert "'kgz'" in failures["message"].iloc[0]


_UNIT_PAIRS = [("in", "cm"), ("ft", "m"), ("lb", "kg"), ("oz", "g"), ("st", "lb"), ("gallon", "L"), ("degF", "degC")]


@settings(max_examples=60, deadline=None)
@given(
    values=st.lists(st.floats(min_value=-1e9, max_value=1e9, allow_nan=False), min_size=1, max_size=20),
    pair=st.sampled_from(_UNIT_PAIRS),
)
def test_convert_then_inverse(values: list[float], pair: tuple[str, str]) -> None:
    there, failures = convert_quantity(pd.Series(values), pair[0], pair[1])
    back, failures_back = convert_quantity(there, pair[1], pair[0])
    assert failures.empty and failures_back.empty
    for original, returned in zip(values, back):
        assert math.isclose(returned, original, rel_tol=1e-9, abs_tol=1e-9)
