"""Merged values ready for analysis: case rule, written postcodes, E.164 phones, date precision,
rounded quantities, exact money sums, counts per entity. Values are invented fixtures."""

from __future__ import annotations

import decimal

import numpy as np
import pandas as pd

from integrate.mapping.spec import CanonicalSchema
from integrate.merged_values import written_postcode
from integrate.resolve import resolve
from integrate.standardise import standardise

MEANING = "A field used in a merged-value test."


def _frame(values: dict[str, list], sources: list[str]) -> pd.DataFrame:
    n = len(sources)
    return pd.DataFrame({"_source": sources, "_record_id": [str(k) for k in range(n)], "_trust": 1,
                         "_record_date": "2025-01-01", **values})


def test_best_cased_name_wins_over_capitals() -> None:
    spec = CanonicalSchema(fields={"given_name": {"type": "person_name", "meaning": MEANING}})
    # the trusted source writes capitals; three others agree in mixed case
    frame = _frame({"given_name": ["FIONA", "Fiona", "Fiona", "fiona"]}, ["a", "b", "c", "d"])
    frame["_trust"] = [1, 2, 3, 4]
    merged, prov = resolve(frame, pd.Series(["E1"] * 4), spec)
    assert merged.loc[0, "given_name"] == "Fiona"
    assert prov.loc[0, "source"] in ("b", "c")
    # all in one case: the winner is kept, never invented
    frame = _frame({"given_name": ["FIONA", "fiona"]}, ["a", "b"])
    assert resolve(frame, pd.Series(["E1", "E1"]), spec)[0].loc[0, "given_name"] == "FIONA"


def test_postcodes_in_written_form() -> None:
    # UK postcode format: outward code, one space, inward code (BS 7666; Royal Mail's written form)
    assert written_postcode("tk148ys") == "TK14 8YS"
    assert written_postcode("EC1A1BB") == "EC1A 1BB"
    assert written_postcode("M11AE") == "M1 1AE"
    assert written_postcode("10115") == "10115"  # not a UK pattern: only cleaned
    spec = CanonicalSchema(fields={"postcode": {"type": "postcode", "meaning": MEANING}})
    frame = _frame({"postcode": ["tk14 8ys", "TK148YS"]}, ["a", "b"])
    prepared = standardise(frame, spec)
    merged, _ = resolve(frame, pd.Series(["E1", "E1"]), spec, prepared)
    assert merged.loc[0, "postcode"] == "TK14 8YS"


def test_merged_phone_is_e164() -> None:
    # E.164 (ITU-T): '+' country code and national number without the trunk prefix 0
    spec = CanonicalSchema(fields={"phone": {"type": "phone", "meaning": MEANING, "region": "GB",
                                             "resolve": "most_recent"}})
    frame = _frame({"phone": ["(0161) 496 0543", "0161 496 0543"]}, ["a", "b"])
    merged, _ = resolve(frame, pd.Series(["E1", "E1"]), spec, standardise(frame, spec))
    assert merged.loc[0, "phone"] == "+441614960543"


def test_full_date_beats_year_and_precision_is_stated() -> None:
    spec = CanonicalSchema(fields={"birth_date": {"type": "date", "meaning": MEANING,
                                                  "resolve": "most_common"}})
    # two sources know the year only; one the full date
    frame = _frame({"birth_date": ["1969", "1969", "1969-06-22", "1980"]}, ["a", "b", "c", "d"])
    merged, _ = resolve(frame, pd.Series(["E1", "E1", "E1", "E2"]), spec)
    merged = merged.set_index("entity_id")
    assert merged.loc["E1", "birth_date"] == "1969-06-22" and merged.loc["E1", "birth_date_precision"] == "day"
    assert merged.loc["E2", "birth_date"] == "1980" and merged.loc["E2", "birth_date_precision"] == "year"


def test_quantities_rounded_to_stated_decimals() -> None:
    spec = CanonicalSchema(fields={"h": {"type": "quantity", "unit": "cm", "meaning": MEANING, "resolve": "trust"},
                                   "w": {"type": "quantity", "unit": "kg", "meaning": MEANING,
                                         "resolve": "trust", "decimals": 1}})
    frame = _frame({"h": [164.08399999999997, 170.125], "w": [69.30891413600001, 70.25]}, ["a", "b"])
    merged, _ = resolve(frame, pd.Series(["E1", "E2"]), spec)
    assert merged["h"].tolist() == [164.08, 170.13]  # default two places, half away from zero
    assert merged["w"].tolist() == [69.3, 70.3]


def test_records_and_sources_per_entity() -> None:
    spec = CanonicalSchema(fields={"f": {"type": "text", "meaning": MEANING}})
    frame = _frame({"f": ["x", "y", "z", "w"]}, ["a", "a", "b", "a"])
    merged, _ = resolve(frame, pd.Series(["E1", "E1", "E1", "E2"]), spec)
    assert merged.columns.tolist()[:3] == ["entity_id", "records", "sources"]
    assert merged["records"].tolist() == [3, 1] and merged["sources"].tolist() == [2, 1]


def test_money_sum_is_exact_and_rounded_once() -> None:
    # reference: Python's decimal module, adding the amounts exactly and rounding the total once
    # (half up), against adding amounts each first rounded to the penny
    rng = np.random.default_rng(5)
    amounts = np.round(rng.uniform(0, 50, size=(200, 7)), 4)  # 4 decimals, like converted amounts
    ids = np.repeat([f"E{k:03d}" for k in range(200)], 7)
    spec = CanonicalSchema(base_currency="GBP", fields={"fee": {"type": "money", "meaning": MEANING,
                                                                "resolve": "sum"}})
    frame = _frame({"fee": amounts.ravel()}, ["a"] * ids.size)
    merged, _ = resolve(frame, pd.Series(ids), spec)
    cent = decimal.Decimal("0.01")
    expected = [float(sum(decimal.Decimal(repr(float(v))) for v in row).quantize(cent, decimal.ROUND_HALF_UP))
                for row in amounts]
    assert merged["fee"].tolist() == expected
    penny_first = [float(sum(decimal.Decimal(repr(float(v))).quantize(cent, decimal.ROUND_HALF_UP) for v in row))
                   for row in amounts]
    assert penny_first != expected  # the fixture does tell the two ways apart


def test_empty_sum_zero() -> None:
    fields = {"fee": {"type": "money", "meaning": MEANING, "resolve": "sum", "empty_sum": "zero"},
              "gift": {"type": "money", "meaning": MEANING, "resolve": "sum"}}
    frame = _frame({"fee": [5.0, None], "gift": [None, None]}, ["a", "b"])
    merged, prov = resolve(frame, pd.Series(["E1", "E2"]), CanonicalSchema(base_currency="GBP", fields=fields))
    merged = merged.set_index("entity_id")
    assert merged.loc["E2", "fee"] == 0.0 and np.isnan(merged.loc["E2", "gift"])
    row = prov[(prov["entity_id"] == "E2") & (prov["field"] == "fee")].iloc[0]
    assert row["value"] == "0.00" and "empty_sum" in row["why"]


def test_written_csv_shows_minor_units_and_stated_decimals(tmp_path) -> None:  # noqa: ANN001
    # ISO 4217: the pound sterling (GBP) has 2 minor-unit digits, the yen (JPY) none
    from integrate.outputs.tables import write_csv

    fields = {"fee": {"type": "money", "meaning": MEANING, "resolve": "sum"},
              "height_cm": {"type": "quantity", "unit": "cm", "meaning": MEANING, "resolve": "max", "decimals": 1}}
    frame = _frame({"fee": [20.0, None, -7.5], "height_cm": [164.08399999999997, None, None]}, ["a", "b", "a"])
    for currency, fee in (("GBP", ["20.00", "", "-7.50"]), ("JPY", ["20", "", "-8"])):
        merged, _ = resolve(frame, pd.Series(["E1", "E2", "E3"]), CanonicalSchema(base_currency=currency,
                                                                                  fields=fields))
        assert merged["fee"].dtype == "float64"  # the table itself keeps numbers
        write_csv(merged, tmp_path / "merged.csv")
        written = pd.read_csv(tmp_path / "merged.csv", dtype=str, keep_default_na=False).set_index("entity_id")
        assert written["fee"].tolist() == fee
        assert written["height_cm"].tolist() == ["164.1", "", ""]
