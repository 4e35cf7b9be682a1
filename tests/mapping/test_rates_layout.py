"""The rates table in the user's own layout: long and wide files, rate direction, gaps in dates.

Rates and dates are invented. An inverse quote is 1 / rate (the definition of an exchange rate
quoted the other way; common practice).
"""

from __future__ import annotations

import datetime as dt
import decimal
from pathlib import Path

import pandas as pd
import pytest

from integrate.errors import SourceError
from integrate.mapping.money import convert_money
from integrate.mapping.rates_layout import load_rates_in_layout, load_workspace_rates
from integrate.mapping.spec import CanonicalSchema, RatesLayout

FIELDS = {"fee": {"type": "money", "meaning": "A fee paid, in the base currency."}}


def _eur(table, currency: str, day: str, max_age: int = 0) -> list[float]:  # noqa: ANN001
    out, failures = convert_money(pd.Series([100.0]), currency, dt.date.fromisoformat(day), "EUR", table,
                                  max_age_days=max_age)
    return out.tolist() + failures["reason"].tolist()


def test_long_layout_with_own_headers_local_formats_and_direction(tmp_path: Path) -> None:
    path = tmp_path / "kurse.csv"
    path.write_text("Datum;Währung;Kurs\n01.03.2026;USD;1,0850\n01.03.2026;GBP;0,8612\n02.03.2026;USD;1,0900\n",
                    encoding="utf-8")
    layout = RatesLayout(date="Datum", currency="Währung", rate="Kurs", direction="from_target",
                         date_format="%d.%m.%Y", number_format="1234,56", delimiter=";")
    table = load_rates_in_layout(path, layout, "EUR", "kurse.csv")
    # 1 EUR = 1.0850 USD, so 100 USD = 100 / 1.0850 EUR = 92.17 EUR (rounded half up to cents)
    assert _eur(table, "USD", "2026-03-01") == [92.17]
    assert _eur(table, "GBP", "2026-03-01") == [116.12]
    assert table.quotes["rate"].iloc[0] == decimal.Decimal("1.0850")


def test_wide_layout(tmp_path: Path) -> None:
    path = tmp_path / "fx.csv"
    path.write_text("day,USD,GBP\n2026-03-01,0.92,1.16\n2026-03-02,0.93,\n", encoding="utf-8")
    table = load_rates_in_layout(path, RatesLayout(layout="wide", date="day"), "EUR", "fx.csv")
    assert _eur(table, "USD", "2026-03-02") == [93.0]  # 1 USD = 0.93 EUR
    assert _eur(table, "GBP", "2026-03-01") == [116.0]


def test_gap_in_dates_is_an_error_unless_older_rates_are_allowed(tmp_path: Path) -> None:
    path = tmp_path / "fx.csv"
    path.write_text("day,USD\n2026-03-01,0.92\n2026-03-05,0.95\n", encoding="utf-8")
    table = load_rates_in_layout(path, RatesLayout(layout="wide", date="day"), "EUR", "fx.csv")
    out = _eur(table, "USD", "2026-03-03")
    assert out[1:] == ["missing_rate"]
    assert _eur(table, "USD", "2026-03-03", max_age=2) == [92.0]  # the nearest earlier rate, 2 days old


@pytest.mark.parametrize(("text", "reason", "line"), [
    ("Datum;Währung;Kurs\n01.03.2026;USD;1,08\n32.03.2026;USD;1,09\n", "bad_date", 3),
    ("Datum;Währung;Kurs\n01.03.2026;XYZ;1,08\n", "unknown_currency", 2),
    ("Datum;Währung;Kurs\n01.03.2026;USD;-1\n", "bad_rate", 2),
    ("Datum;Währung;Kurs\n01.03.2026;USD;1,08\n01.03.2026;USD;1,09\n", "duplicate_rate", 3),
    ("Date;Währung;Kurs\n01.03.2026;USD;1,08\n", "missing_column", 1),
])
def test_errors_name_the_line(tmp_path: Path, text: str, reason: str, line: int) -> None:
    path = tmp_path / "kurse.csv"
    path.write_text(text, encoding="utf-8")
    layout = RatesLayout(date="Datum", currency="Währung", rate="Kurs", date_format="%d.%m.%Y",
                         number_format="1234,56", delimiter=";")
    with pytest.raises(SourceError) as caught:
        load_rates_in_layout(path, layout, "EUR", "kurse.csv")
    assert caught.value.reason == reason and caught.value.line == line and caught.value.file == "kurse.csv"


def test_canonical_schema_declares_the_layout(tmp_path: Path) -> None:
    path = tmp_path / "fx.csv"
    path.write_text("when,from_ccy,to_ccy,price\n2026-03-01,USD,EUR,0.92\n", encoding="utf-8")
    canonical = CanonicalSchema.model_validate({"base_currency": "EUR", "rates": "fx.csv", "fields": FIELDS,
                                                "rates_layout": {"date": "when", "currency": "from_ccy",
                                                                 "target": "to_ccy", "rate": "price"}})
    assert _eur(load_workspace_rates(canonical, path), "USD", "2026-03-01") == [92.0]
    with pytest.raises(ValueError, match="'currency' and 'rate'"):
        RatesLayout(date="when")
