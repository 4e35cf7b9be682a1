"""Addresses in one cell: a declared layout, or the postcode recognised by its shape.

Postcode shapes are the national formats (UK 'TC1 4AB' outward + inward code; five digits in
Germany; four digits and two letters in the Netherlands): common practice. Addresses are invented.
"""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

from integrate.columns import ROW
from integrate.mapping.addresses import layout_pattern, split_address
from integrate.mapping.apply import apply_mapping
from integrate.mapping.spec import CanonicalSchema, SourceMapping


@pytest.mark.parametrize(("text", "parts"), [
    ("4 Mill Lane, Tallow Creek, TC1 4AB", {"street": "4 Mill Lane", "town": "Tallow Creek", "postcode": "TC1 4AB"}),
    ("4 Mill Lane, TC1 4AB", {"street": "4 Mill Lane", "postcode": "TC1 4AB"}),
    ("Hauptstr. 5, 12345 Lindenau", {"street": "Hauptstr. 5", "town": "Lindenau", "postcode": "12345"}),
    ("Kade 12, 1234 AB Veendam", {"street": "Kade 12", "town": "Veendam", "postcode": "1234 AB"}),
    ("22 Reed Row, Ferrybridge Mill, tc2 9zz", {"street": "22 Reed Row", "town": "Ferrybridge Mill",
                                                "postcode": "TC2 9ZZ"}),
])
def test_postcode_recognised(text: str, parts: dict[str, str]) -> None:
    assert split_address(text) == parts


def test_no_postcode_is_not_read() -> None:
    assert split_address("Mill Lane, Tallow Creek") is None


def test_declared_layout() -> None:
    pattern = layout_pattern("street, town, postcode")
    assert split_address("4 Mill Lane, Tallow Creek, TC1 4AB", pattern) == {
        "street": "4 Mill Lane", "town": "Tallow Creek", "postcode": "TC1 4AB"}
    assert split_address("4 Mill Lane Tallow", pattern) is None
    with pytest.raises(ValueError, match="not one of"):
        layout_pattern("street, city")


def test_mapping_fills_fields_and_counts_failures() -> None:
    canonical = CanonicalSchema.model_validate({"fields": {
        "street": {"type": "text", "meaning": "House number and street."},
        "postcode": {"type": "postcode", "meaning": "Postcode of the home address."}}})
    mapping = SourceMapping.model_validate({
        "source": "club", "read": {"format": "csv", "path": "c.csv"}, "record_id": "id",
        "as_of": dt.date(2026, 1, 1), "max_unreadable": 0.5,
        "columns": {"id": "ignore", "Address": {"address_format": "auto",
                                                "address_fields": {"street": "street", "postcode": "postcode"}}}})
    raw = pd.DataFrame({"id": list("abc"), "Address": ["4 Mill Lane, Tallow Creek, TC1 4AB", "somewhere", None]},
                       dtype="string")
    raw[ROW] = range(2, 5)
    result = apply_mapping(raw, mapping, canonical, None, data_file="c.csv", mapping_file="c.yaml")
    assert result.frame["street"].tolist()[0] == "4 Mill Lane" and result.frame["postcode"].tolist()[0] == "TC1 4AB"
    assert result.failures[["row", "reason"]].values.tolist() == [[3, "address_not_split"]]
    with pytest.raises(ValueError, match="go together"):
        SourceMapping.model_validate({"source": "club", "read": {"format": "csv", "path": "c.csv"},
                                      "record_id": "id", "as_of": dt.date(2026, 1, 1),
                                      "columns": {"Address": {"address_format": "auto"}}})
