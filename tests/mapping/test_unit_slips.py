"""fix_unit_slips: rows typed in another unit than the column's are converted and named.

1 in = 2.54 cm exactly and 1 lb = 0.45359237 kg exactly (NIST SP 811, Appendix B.8).
"""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

from integrate.columns import ROW
from integrate.errors import InputError
from integrate.mapping.apply import apply_mapping
from integrate.mapping.slips import UNIT_FIXES
from integrate.mapping.spec import CanonicalSchema, SourceMapping

CANONICAL = CanonicalSchema.model_validate({"fields": {
    "height_cm": {"type": "quantity", "unit": "cm", "range": [100, 230], "meaning": "Standing height in cm."},
    "weight_kg": {"type": "quantity", "unit": "kg", "range": [25, 250], "meaning": "Body weight in kg."},
    "shoe": {"type": "quantity", "unit": "cm", "meaning": "Foot length in centimetres."}}})


def _mapping(columns: dict) -> SourceMapping:
    return SourceMapping.model_validate({"source": "club", "read": {"format": "csv", "path": "c.csv"},
                                         "record_id": "id", "as_of": dt.date(2026, 1, 1),
                                         "columns": {"id": "ignore", **columns}})


def _raw(**columns: list) -> pd.DataFrame:
    n = len(next(iter(columns.values())))
    raw = pd.DataFrame({"id": [str(i) for i in range(n)], **columns}, dtype="string")
    raw[ROW] = range(2, n + 2)
    return raw


def test_slipped_rows_are_converted_and_named() -> None:
    usual_ht, usual_wt = ["66"] * 10, ["150"] * 10  # the column's usual rows: slips are a few among many
    raw = _raw(ht=["68", "172", "70", None, None] + usual_ht, wt=["154", "70", "300", "12", "3"] + usual_wt)
    result = apply_mapping(raw, _mapping({"ht": {"field": "height_cm", "unit": "in", "fix_unit_slips": True},
                                          "wt": {"field": "weight_kg", "unit": "lb", "fix_unit_slips": True}}),
                           CANONICAL, None, data_file="c.csv", mapping_file="c.yaml")
    out = result.frame.head(5)
    assert out["height_cm"].round(2).tolist()[:3] == [172.72, 172.0, 177.8]
    # 70 lb = 31.75 kg is in range (a light child) so it stays; 300 lb = 136.08 kg stays; 12 lb is out of
    # range but 12 st = 168 lb = 76.20 kg is in it (1 st = 14 lb); 3 fits no unit and stays 1.36 kg
    assert out["weight_kg"].round(2).tolist() == [69.85, 31.75, 136.08, 76.2, 1.36]
    assert out[UNIT_FIXES].tolist()[1] == "height_cm: read as centimetres (cm), not inches (in)"
    assert out[UNIT_FIXES].tolist()[3] == "weight_kg: read as stone (st), not pounds (lb)"
    assert out[UNIT_FIXES].isna().tolist() == [True, False, True, False, True]


def test_a_column_mostly_out_of_range_is_a_wrong_unit_not_slips() -> None:
    raw = _raw(ht=["172", "180", "165", "68"])  # centimetres declared as inches: check names the factor
    out = apply_mapping(raw, _mapping({"ht": {"field": "height_cm", "unit": "in", "fix_unit_slips": True}}),
                        CANONICAL, None, data_file="c.csv", mapping_file="c.yaml").frame
    assert out["height_cm"].round(2).tolist() == [436.88, 457.2, 419.1, 172.72] and UNIT_FIXES not in out


def test_without_the_option_rows_stay_as_declared() -> None:
    raw = _raw(ht=["68", "172"])
    out = apply_mapping(raw, _mapping({"ht": {"field": "height_cm", "unit": "in"}}), CANONICAL, None,
                        data_file="c.csv", mapping_file="c.yaml").frame
    assert out["height_cm"].round(2).tolist() == [172.72, 436.88] and UNIT_FIXES not in out


def test_needs_a_range_and_a_unit() -> None:
    raw = _raw(f=["26"])
    with pytest.raises(InputError, match="range"):
        apply_mapping(raw, _mapping({"f": {"field": "shoe", "unit": "cm", "fix_unit_slips": True}}), CANONICAL,
                      None, data_file="c.csv", mapping_file="c.yaml")
    with pytest.raises(ValueError, match="unit"):
        _mapping({"f": {"field": "shoe", "unit_column": "u", "fix_unit_slips": True}})


def test_a_corrected_unit_is_named_in_the_provenance_of_the_merged_value() -> None:
    from integrate.resolve import resolve

    # one person, two records: 172 typed into the inches column (172 cm), and 68 in = 172.72 cm
    usual = ["66"] * 10
    raw = _raw(ht=["172", "68"] + usual, wt=[None, "150"] + ["150"] * 10)
    mapping = _mapping({"ht": {"field": "height_cm", "unit": "in", "fix_unit_slips": True},
                        "wt": {"field": "weight_kg", "unit": "lb", "fix_unit_slips": True}})
    records = apply_mapping(raw, mapping, CANONICAL, None, data_file="c.csv", mapping_file="c.yaml").frame
    canonical = CANONICAL.model_copy(update={"fields": {
        "height_cm": CANONICAL.fields["height_cm"].model_copy(update={"resolve": "min"}),
        "weight_kg": CANONICAL.fields["weight_kg"].model_copy(update={"resolve": "mean"})}})
    entity = pd.Series(["E1", "E1"] + [f"E{k + 2}" for k in range(10)])
    merged, provenance = resolve(records, entity, canonical)
    height = provenance[(provenance["entity_id"] == "E1") & (provenance["field"] == "height_cm")].iloc[0]
    assert height["value"] == "172" and height["record_id"] == "0"  # the corrected row won (min)
    assert height["why"] == "the smallest value (2 values); unit fixed: read as centimetres (cm), not inches (in)"
    assert "172 [club:0] (unit fixed: read as centimetres (cm), not inches (in))" in height["alternatives"]
    assert "[club:1] (unit fixed" not in height["alternatives"]
    # the weight of the same records was not corrected: nothing is said
    weight = provenance[(provenance["entity_id"] == "E1") & (provenance["field"] == "weight_kg")].iloc[0]
    assert "unit" not in weight["why"] and "unit fixed" not in weight["alternatives"]
    # a mean that used a corrected value says how many
    other = provenance[(provenance["entity_id"] == "E2") & (provenance["field"] == "height_cm")].iloc[0]
    assert "unit" not in other["why"]
    records.loc[1, UNIT_FIXES] = "weight_kg: read as kilograms (kg), not pounds (lb)"
    canonical_mean = canonical.model_copy(update={"fields": {
        **canonical.fields, "height_cm": canonical.fields["height_cm"].model_copy(update={"resolve": "mean"})}})
    _, provenance = resolve(records, entity, canonical_mean)
    height = provenance[(provenance["entity_id"] == "E1") & (provenance["field"] == "height_cm")].iloc[0]
    assert height["why"] == "the mean of the values (2 values); 1 value read in another unit (fix_unit_slips)"
    weight = provenance[(provenance["entity_id"] == "E1") & (provenance["field"] == "weight_kg")].iloc[0]
    assert weight["why"] == "the only value; 1 value read in another unit (fix_unit_slips)"
