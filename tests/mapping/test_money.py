"""Money: ISO 4217 minor units, amount parsing, dated rates, half-up rounding."""

from __future__ import annotations

import datetime as dt
import math
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.errors import ConversionError, SourceError
from integrate.mapping.money import convert_money, is_currency, load_rates, minor_units, parse_amounts

# Invented rates for the tests (not market data).
RATES_CSV = """\
# invented rates for tests
date,from,to,rate
2024-01-01,GBP,EUR,1.15
2024-01-05,GBP,EUR,1.17

2024-01-01,EUR,USD,1.10
2024-01-01,EUR,JPY,160
"""


@pytest.fixture()
def rates_file(tmp_path: Path) -> Path:
    path = tmp_path / "rates.csv"
    path.write_text(RATES_CSV, encoding="utf-8")
    return path


# --- ISO 4217 ----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("code", "digits"),
    # ISO 4217 List One minor units, as bundled in the iso4217 package (list published 2026-01-01);
    # REFERENCE_CHECKS section 3 (agrees with babel/CLDR for these codes)
    [("USD", 2), ("EUR", 2), ("GBP", 2), ("JPY", 0), ("BHD", 3), ("KWD", 3), ("ISK", 0), ("CLP", 0)],
)
def test_minor_units(code: str, digits: int) -> None:
    assert minor_units(code) == digits
    assert minor_units(f" {code.lower()} ") == digits


def test_unknown_currency() -> None:
    assert not is_currency("EURO") and not is_currency("") and is_currency(" gbp")
    with pytest.raises(ConversionError) as caught:
        minor_units("XYZ")
    assert (caught.value.reason, caught.value.value) == ("unknown_currency", "XYZ")


def test_currency_without_minor_units_raises() -> None:
    # ISO 4217 gives "N.A." minor units for gold (XAU): an amount cannot be rounded in it
    assert is_currency("XAU")
    with pytest.raises(ConversionError) as caught:
        minor_units("XAU")
    assert caught.value.reason == "no_minor_units"


# --- amounts -----------------------------------------------------------------------------


def test_parse_amounts() -> None:
    values = pd.Series(["45", "45.00", "1,234.50", "€12.50", "£ 3", "-4.5", "(4.50)", "1 234.5", None, "", "12,50",
                        "abc", "1.2.3"])
    amounts, failures = parse_amounts(values)
    assert amounts.iloc[:8].tolist() == [45.0, 45.0, 1234.5, 12.5, 3.0, -4.5, -4.5, 1234.5]
    assert amounts.iloc[8:].isna().all()
    assert failures[["index", "value", "reason"]].values.tolist() == [
        [10, "12,50", "bad_amount"],
        [11, "abc", "bad_amount"],
        [12, "1.2.3", "bad_amount"],
    ]


@settings(max_examples=100, deadline=None)
@given(cents=st.integers(min_value=-10**13, max_value=10**13), symbol=st.sampled_from(["", "€", "£ ", "$"]))
def test_parse_amounts_round_trip(cents: int, symbol: str) -> None:
    amount = cents / 100
    text = f"{symbol}{amount:,.2f}" if amount >= 0 else f"-{symbol}{-amount:,.2f}"
    parsed, failures = parse_amounts(pd.Series([text]))
    assert failures.empty
    assert parsed.iloc[0] == amount


# --- rates table -------------------------------------------------------------------------


def test_load_rates(rates_file: Path) -> None:
    table = load_rates(rates_file)
    quotes = table.quotes
    assert list(quotes.columns) == ["date", "from", "to", "rate", "line"]
    assert quotes["line"].tolist() == [3, 4, 6, 7]
    assert quotes["rate"].tolist() == [Decimal("1.15"), Decimal("1.17"), Decimal("1.10"), Decimal("160")]


@pytest.mark.parametrize(
    ("text", "line", "reason"),
    [
        ("date,from,to,rate\n2024-01-01,GBP,EUR,1.1\n2024-01-02,GBP,EUR\n", 3, "bad_row"),
        ("# c\n\ndate,from,to,rate\n2024-02-30,GBP,EUR,1.1\n", 4, "bad_date"),
        ("date,from,to,rate\n2024-01-01,GBP,EUX,1.1\n", 2, "unknown_currency"),
        ("date,from,to,rate\n2024-01-01,GBP,EUR,-2\n", 2, "bad_rate"),
        ("date,from,to,rate\n2024-01-01,GBP,EUR,abc\n", 2, "bad_rate"),
        ("date,from,to,rate\n2024-01-01,GBP,EUR,1.1\n2024-01-01,GBP,EUR,1.2\n", 3, "duplicate_rate"),
        ("day,from,to,rate\n", 1, "bad_header"),
    ],
)
def test_load_rates_errors_name_the_line(tmp_path: Path, text: str, line: int, reason: str) -> None:
    path = tmp_path / "rates.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        load_rates(path)
    err = caught.value
    assert (err.file, err.line, err.reason) == (str(path), line, reason)


# --- conversion --------------------------------------------------------------------------


def test_rate_on_or_before_the_date(rates_file: Path) -> None:
    rates = load_rates(rates_file)
    dates = pd.Series(["2024-01-01", "2024-01-04", "2024-01-05", "2024-01-06T09:30:00"])
    converted, failures = convert_money(pd.Series([10.0] * 4), "GBP", dates, "EUR", rates)
    assert failures.empty
    # 10 x 1.15 = 11.5 until the 1.17 rate of 2024-01-05 is in force (invented rates above)
    assert converted.tolist() == [11.5, 11.5, 11.7, 11.7]


def test_dates_as_datetime64(rates_file: Path) -> None:
    dates = pd.Series(pd.to_datetime(["2024-01-04 18:00", "2024-01-05 08:00"]))
    converted, failures = convert_money(pd.Series([10.0, 10.0]), "GBP", dates, "EUR", load_rates(rates_file))
    assert failures.empty
    # the time of day does not matter: the 2024-01-05 rate is in force all that day (invented rates above)
    assert converted.tolist() == [11.5, 11.7]


def test_rate_before_any_quote_is_missing(rates_file: Path) -> None:
    converted, failures = convert_money(
        pd.Series([10.0]), "GBP", pd.Series(["2023-12-31"]), "EUR", load_rates(rates_file)
    )
    assert math.isnan(converted.iloc[0])
    assert failures["reason"].tolist() == ["missing_rate"]


def test_max_age(rates_file: Path) -> None:
    rates = load_rates(rates_file)
    dates = pd.Series(["2024-01-12", "2024-01-13", "2024-01-20"])
    converted, failures = convert_money(pd.Series([10.0, 10.0, 10.0]), "GBP", dates, "EUR", rates, max_age_days=7)
    # the 2024-01-05 rate is 7 days old on 2024-01-12 (allowed) and 8 days old on 2024-01-13 (too old)
    assert converted.iloc[0] == 11.7 and converted.iloc[1:].isna().all()
    assert failures["index"].tolist() == [1, 2]
    message = failures["message"].iloc[0]
    # the message names the currency and lists every date without a rate
    assert "GBP" in message and "2024-01-13" in message and "2024-01-20" in message
    longer, failures = convert_money(pd.Series([10.0]), "GBP", pd.Series(["2024-01-20"]), "EUR", rates,
                                     max_age_days=15)
    assert longer.tolist() == [11.7] and failures.empty


def test_inverse_rate(rates_file: Path) -> None:
    # only EUR->USD 1.10 is quoted: 11 USD = 11 / 1.10 EUR = 10.00 EUR exactly
    converted, failures = convert_money(pd.Series([11.0, 1.0]), "USD", dt.date(2024, 1, 2), "EUR",
                                        load_rates(rates_file))
    assert failures.empty
    # 1 / 1.10 = 0.90909... -> 0.91 (ISO 4217: EUR has 2 minor units)
    assert converted.tolist() == [10.0, 0.91]


def test_round_half_up_to_base_minor_units(rates_file: Path) -> None:
    rates = load_rates(rates_file)
    # hand-computed: 0.15 GBP x 1.15 = 0.1725 EUR -> 0.17; 0.3 GBP x 1.15 = 0.345 EUR -> 0.35 (half up;
    # binary floating point gives 0.3 * 1.15 = 0.34499999999999997, which round() would take to 0.34)
    converted, _ = convert_money(pd.Series([0.15, 0.3]), "GBP", dt.date(2024, 1, 1), "EUR", rates)
    assert converted.tolist() == [0.17, 0.35]
    assert round(0.3 * 1.15, 2) == 0.34  # why decimal arithmetic is needed
    assert Decimal("0.345").quantize(Decimal("0.01"), rounding=ROUND_HALF_UP) == Decimal("0.35")
    # JPY has 0 minor units (ISO 4217): 1.5 EUR x 160 = 240 JPY; 0.003125 EUR x 160 = 0.5 JPY -> 1 (half up)
    yen, _ = convert_money(pd.Series([1.5, 0.003125]), "EUR", dt.date(2024, 1, 1), "JPY", rates)
    assert yen.tolist() == [240.0, 1.0]


def test_same_currency_is_rounded_without_rates() -> None:
    # 2.675 as written rounds half up to 2.68 (the float 2.675 is 2.67499999..., so round() gives 2.67)
    converted, failures = convert_money(pd.Series([2.675, 10.0, np.nan]), "eur", dt.date(2024, 1, 1), "EUR", None)
    assert failures.empty
    assert converted.iloc[:2].tolist() == [2.68, 10.0] and math.isnan(converted.iloc[2])


def test_per_row_failures(rates_file: Path) -> None:
    rates = load_rates(rates_file)
    amounts = pd.Series([1.0, 2.0, 3.0, 4.0, np.nan, 6.0], index=list("abcdef"))
    currencies = pd.Series(["GBP", "XYZ", None, "GBP", "GBP", "EUR"], index=list("abcdef"))
    dates = pd.Series(["2024-01-02", "2024-01-02", "2024-01-02", None, None, None], index=list("abcdef"))
    converted, failures = convert_money(amounts, currencies, dates, "EUR", rates)
    # 1 GBP x 1.15 = 1.15 EUR; EUR needs no date; a missing amount is not a failure
    assert converted.loc["a"] == 1.15 and converted.loc["f"] == 6.0
    assert converted.loc[["b", "c", "d", "e"]].isna().all()
    assert dict(zip(failures["index"], failures["reason"])) == {
        "b": "unknown_currency",
        "c": "missing_currency",
        "d": "missing_date",
    }
    assert list(failures.columns) == ["index", "value", "reason", "message"]


def test_no_rates_table_means_missing_rate() -> None:
    converted, failures = convert_money(pd.Series([1.0]), "GBP", dt.date(2024, 1, 1), "EUR", None)
    assert math.isnan(converted.iloc[0])
    assert failures["reason"].tolist() == ["missing_rate"]


def test_unknown_single_currency_raises(rates_file: Path) -> None:
    with pytest.raises(ConversionError) as caught:
        convert_money(pd.Series([1.0]), "GBX", dt.date(2024, 1, 1), "EUR", load_rates(rates_file))
    assert caught.value.reason == "unknown_currency"


def test_round_to_three_minor_units() -> None:
    # BHD has 3 minor units (ISO 4217 List One, as bundled in iso4217): 1 EUR at 0.4105 -> 0.411 BHD;
    # 2.5 EUR x 0.4105 = 1.02625 -> 1.026; 0.00125 x 0.4105 = 0.000513125 -> 0.001 (half up at the 4th digit)
    quotes = pd.DataFrame({"date": pd.to_datetime(["2024-01-01"]), "from": ["EUR"], "to": ["BHD"],
                           "rate": [Decimal("0.4105")], "line": [2]})
    from integrate.mapping.money import RatesTable

    converted, failures = convert_money(pd.Series([1.0, 2.5, 0.00125]), "EUR", dt.date(2024, 1, 1), "BHD",
                                        RatesTable(quotes))
    assert failures.empty
    assert converted.tolist() == [0.411, 1.026, 0.001]


def test_money_sums_are_exact() -> None:
    # resolution rule 'sum' adds money in integer minor units: 0.10 + 0.20 is 0.30 exactly,
    # where binary floating point gives 0.30000000000000004 (hand-computed)
    from integrate.mapping.spec import CanonicalSchema
    from integrate.resolve import resolve

    assert 0.1 + 0.2 != 0.3  # why integer minor units are needed
    schema = CanonicalSchema(base_currency="GBP", fields={
        "deposits_gbp": {"type": "money", "meaning": "Deposits paid; separate rentals add up.", "resolve": "sum"}})
    records = pd.DataFrame({"_source": ["a", "a", "b"], "_record_id": ["1", "2", "3"], "_trust": [1, 1, 2],
                            "_record_date": ["2026-01-01"] * 3, "deposits_gbp": [0.1, 0.2, None]})
    merged, _ = resolve(records, pd.Series(["E1", "E1", "E1"]), schema)
    assert merged["deposits_gbp"].tolist() == [0.3]


def _paid(amounts: list[str], dates: list[str], rates: Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    """One entity's payments in GBP, read through a mapping into EUR and summed by ``resolve``."""
    from integrate.columns import ROW
    from integrate.mapping.apply import apply_mapping
    from integrate.mapping.spec import CanonicalSchema, SourceMapping
    from integrate.resolve import resolve

    canonical = CanonicalSchema.model_validate({"base_currency": "EUR", "fields": {
        "paid_eur": {"type": "money", "meaning": "Payments; separate ones add up.", "resolve": "sum"}}})
    mapping = SourceMapping.model_validate({
        "source": "club", "read": {"format": "csv", "path": "c.csv"}, "record_id": "id",
        "as_of": dt.date(2024, 1, 31),
        "columns": {"id": "ignore", "day": "ignore",
                    "paid": {"field": "paid_eur", "currency": "GBP", "priced_on": "day"}}})
    raw = pd.DataFrame({"id": [str(i) for i in range(len(amounts))], "paid": amounts, "day": dates},
                       dtype="string")
    raw[ROW] = range(2, len(amounts) + 2)
    records = apply_mapping(raw, mapping, canonical, load_rates(rates), data_file="c.csv",
                            mapping_file="c.yaml").frame
    return resolve(records, pd.Series(["E1"] * len(records)), canonical)


def test_converted_payments_are_summed_exactly_and_rounded_once(rates_file: Path) -> None:
    # hand-computed: 0.15 GBP x 1.15 = 0.1725 EUR. Ten such payments rounded one by one add up to
    # 1.70 EUR; summed exactly they are 1.725 EUR, rounded once half up 1.73 EUR
    merged, provenance = _paid(["0.15"] * 10, ["2024-01-02"] * 10, rates_file)
    assert merged["paid_eur"].tolist() == [1.73]
    assert provenance["value"].tolist() == ["1.73"] and provenance["why"].tolist() == ["sum of 10 values"]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(1, 100_000), min_size=1, max_size=40),
       st.lists(st.sampled_from(["2024-01-02", "2024-01-06"]), min_size=40, max_size=40))
def test_sums_of_converted_payments_match_exact_decimal_arithmetic(cents: list[int], days: list[str]) -> None:
    # reference: Python's decimal module, each payment x its day's rate exactly, the total rounded
    # once half up to the cent (ISO 4217: EUR has 2 minor units)
    import tempfile

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "rates.csv"
        path.write_text(RATES_CSV, encoding="utf-8")
        amounts = [f"{c / 100:.2f}" for c in cents]
        merged, _ = _paid(amounts, days[: len(cents)], path)
    rate = {"2024-01-02": Decimal("1.15"), "2024-01-06": Decimal("1.17")}
    exact = sum(Decimal(a) * rate[d] for a, d in zip(amounts, days, strict=False))
    assert merged["paid_eur"].iloc[0] == float(exact.quantize(Decimal("0.01"), rounding=ROUND_HALF_UP))


def test_a_single_converted_payment_is_rounded_half_up_when_merged(rates_file: Path) -> None:
    # 0.3 GBP x 1.15 = 0.345 EUR exactly: half up gives 0.35 (the float product 0.34499999999999997
    # would round to 0.34); the converted record keeps the exact 0.345 until it is merged
    from integrate.mapping.money import FINE_DIGITS

    converted, _ = convert_money(pd.Series([0.3]), "GBP", dt.date(2024, 1, 1), "EUR", load_rates(rates_file),
                                 extra_digits=FINE_DIGITS)
    assert converted.tolist() == [0.345]
    merged, provenance = _paid(["0.3"], ["2024-01-02"], rates_file)
    assert merged["paid_eur"].tolist() == [0.35] and provenance["value"].tolist() == ["0.35"]
