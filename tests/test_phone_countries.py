"""Phones with a declared country: ISO 3166 codes, calling codes, and calling codes the library does not know.

E.164 (ITU-T) numbers are '+', the country calling code and the national significant number, at
most 15 digits; the national prefix ('0' in most of Europe) and the '00' international prefix are
the dialling conventions of the plans used below (common practice). '+999' is not an assigned
calling code (ITU-T lists 999 as spare, recalled from memory), so phonenumbers does not know it:
the workspace declares it.
"""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

from integrate.columns import ROW, SOURCE
from integrate.errors import InputError
from integrate.mapping.apply import apply_mapping
from integrate.mapping.spec import CanonicalSchema, SourceMapping
from integrate.phone_numbers import CallingCode, calling_code_of, is_country, to_e164
from integrate.standardise import standardise

PLAN = {"999": CallingCode("999", "0", (9,))}


@pytest.mark.parametrize("text", ["+999 75 043 5081", "(075) 043-5081", "0999750435081", "00999 75 043 50 81",
                                  "75 043 5081"])
def test_declared_calling_code_forms_agree(text: str) -> None:
    assert to_e164(text, "+999", PLAN) == "+999750435081"


def test_declared_code_checks_lengths_and_leaves_other_countries_to_the_library() -> None:
    assert to_e164("075 043", "+999", PLAN) == "075043"  # too short for the plan: digits only
    # an international number of another country, in a column whose default is the declared plan
    assert to_e164("+44 20 7946 0123", "+999", PLAN) == "+442079460123"
    # a declared-plan number in a column whose default country is another
    assert to_e164("+999 75 043 5081", "GB", PLAN) == "+999750435081"


@pytest.mark.parametrize(("text", "country", "e164"), [
    # UK drama numbers (Ofcom's range reserved for fiction, 020 7946 0xxx); the German number is an
    # invented Berlin number: national prefix 0, calling code 49 (ITU-T E.164 assignment list)
    ("020 7946 0123", "GB", "+442079460123"),
    ("020 7946 0123", "+44", "+442079460123"),
    ("030 1234567", "DE", "+49301234567"),
    ("030 1234567", "49", "+49301234567"),
])
def test_iso_and_known_calling_codes(text: str, country: str, e164: str) -> None:
    assert to_e164(text, country) == e164


def test_country_lookups() -> None:
    assert calling_code_of("GB") == "44" and calling_code_of("+999") == "999"
    assert is_country("DE") and is_country("+49") and not is_country("+999") and is_country("+999", PLAN)
    assert not is_country("XQ")


CANONICAL = CanonicalSchema.model_validate({
    "calling_codes": {"+999": {"national_prefix": "0", "national_digits": [9]}},
    "fields": {"phone": {"type": "phone", "meaning": "A phone number reaching the person."}},
})


def _map(columns: dict, **extra: object) -> SourceMapping:
    return SourceMapping.model_validate({"source": "club", "read": {"format": "csv", "path": "c.csv"},
                                         "record_id": "id", "as_of": dt.date(2026, 1, 1),
                                         "columns": {"id": "ignore", **columns}, **extra})


def test_country_per_column_stores_e164() -> None:
    raw = pd.DataFrame({"id": ["a", "b", "c", "d"], "tel": ["+999 75 043 5081", "(075) 043-5081",
                                                            "0999750435081", None]}, dtype="string")
    raw[ROW] = range(2, 6)
    out = apply_mapping(raw, _map({"tel": {"field": "phone", "country": "+999"}}), CANONICAL, None,
                        data_file="c.csv", mapping_file="c.yaml").frame
    assert out["phone"].tolist()[:3] == ["+999750435081"] * 3 and pd.isna(out["phone"].iloc[3])


def test_unknown_country_is_a_mapping_error() -> None:
    raw = pd.DataFrame({"id": ["a"], "tel": ["075 043 5081"]}, dtype="string")
    raw[ROW] = [2]
    with pytest.raises(InputError, match="calling_codes"):
        apply_mapping(raw, _map({"tel": {"field": "phone", "country": "+990"}}), CANONICAL, None,
                      data_file="c.csv", mapping_file="c.yaml")
    with pytest.raises(ValueError, match="ISO 3166"):
        _map({"tel": {"field": "phone", "country": "Narnia"}})


def test_source_country_with_declared_code_in_standardise() -> None:
    records = pd.DataFrame({SOURCE: ["a", "a", "b"], "phone": ["(075) 043-5081", "00999750435081",
                                                               "+999 75 043 5081"]}, dtype="string")
    prepared = standardise(records, CANONICAL, {"a": "+999", "b": "GB"})
    assert prepared["phone"].tolist() == ["+999750435081"] * 3
