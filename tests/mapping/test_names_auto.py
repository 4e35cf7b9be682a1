"""name_format: auto — whole names in mixed layouts, in one column.

The layouts are the ones registers write (common practice): 'Family, Given' in sorted lists,
'Given Family' elsewhere, Dutch registers sorting 'Berg, Anna van der'. All names are invented.
"""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

from integrate.columns import ROW
from integrate.mapping.apply import apply_mapping
from integrate.mapping.names import split_name
from integrate.mapping.spec import CanonicalSchema, SourceMapping


@pytest.mark.parametrize(("text", "given", "family"), [
    ("Quill, Marta", "Marta", "Quill"),
    ("Quill, Marta J.", "Marta", "Quill"),
    ("Marta Quill", "Marta", "Quill"),
    ("Marta J. Quill", "Marta", "Quill"),
    ("Marta Jo Quill", "Marta Jo", "Quill"),
    ("Anna van der Berg", "Anna", "van der Berg"),
    ("van der Berg, Anna", "Anna", "van der Berg"),
    ("Berg, Anna van der", "Anna", "van der Berg"),
    ("Luis de la Cruz", "Luis", "de la Cruz"),
    ("Jean-Luc Dubois-Martin", "Jean-Luc", "Dubois-Martin"),
    ("Dubois-Martin, Jean-Luc", "Jean-Luc", "Dubois-Martin"),
    ("Mrs Ola  Brightwater", "Ola", "Brightwater"),
    ("Okonkwo", None, "Okonkwo"),
])
def test_layouts(text: str, given: str | None, family: str) -> None:
    assert split_name(text) == (given, family)


@pytest.mark.parametrize("text", ["Room 12", "Quill, ", ", Marta", "a, b, c", "???", "marta@example.org"])
def test_values_that_are_not_names_are_not_split(text: str) -> None:
    assert split_name(text) is None


def test_mapping_fills_both_fields_and_counts_failures() -> None:
    canonical = CanonicalSchema.model_validate({"fields": {
        "given_name": {"type": "person_name", "meaning": "The given name of the person."},
        "family_name": {"type": "person_name", "meaning": "The family name of the person."}}})
    mapping = SourceMapping.model_validate({
        "source": "club", "read": {"format": "csv", "path": "c.csv"}, "record_id": "id",
        "as_of": dt.date(2026, 1, 1), "max_unreadable": 0.5,
        "columns": {"id": "ignore", "Name": {"name_format": "auto"}}})
    raw = pd.DataFrame({"id": list("abcde"), "Name": ["Quill, Marta", "Anna van der Berg", "Okonkwo", "Room 12",
                                                      None]}, dtype="string")
    raw[ROW] = range(2, 7)
    result = apply_mapping(raw, mapping, canonical, None, data_file="c.csv", mapping_file="c.yaml")
    assert result.frame["given_name"].tolist()[:2] == ["Marta", "Anna"]
    assert result.frame["family_name"].tolist()[:3] == ["Quill", "van der Berg", "Okonkwo"]
    assert result.failures[["row", "value", "reason"]].values.tolist() == [[5, "Room 12", "name_not_split"]]
    with pytest.raises(ValueError, match="exactly one"):
        SourceMapping.model_validate({
            "source": "club", "read": {"format": "csv", "path": "c.csv"}, "record_id": "id",
            "as_of": dt.date(2026, 1, 1), "columns": {"Name": {"name_format": "auto", "field": "given_name"}}})
