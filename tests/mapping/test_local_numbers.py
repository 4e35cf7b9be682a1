"""Numbers in local formats, the unreadable-share limit, and a default currency beside a currency column."""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

from integrate.columns import ROW
from integrate.errors import InputError, InputErrors
from integrate.mapping.apply import apply_mapping
from integrate.mapping.numbers import detect_number_format, number_format, to_plain_numbers
from integrate.mapping.spec import CanonicalSchema, SourceMapping

CANONICAL = CanonicalSchema.model_validate({
    "base_currency": "EUR",
    "fields": {
        "given_name": {"type": "person_name", "meaning": "The given name of the person."},
        "fee": {"type": "money", "meaning": "A fee paid, in the base currency.", "resolve": "sum"},
        "weight_kg": {"type": "quantity", "unit": "kg", "meaning": "Body weight in kilograms."},
    },
})


def _mapping(columns: dict, **extra: object) -> SourceMapping:
    return SourceMapping.model_validate({
        "source": "club", "read": {"format": "csv", "path": "club.csv"}, "record_id": "id",
        "as_of": dt.date(2026, 1, 31), "columns": {"id": "ignore", **columns}, **extra,
    })


def _raw(**columns: list[str | None]) -> pd.DataFrame:
    n = len(next(iter(columns.values())))
    frame = pd.DataFrame({"id": [f"r{i}" for i in range(n)], **columns}, dtype="string")
    frame[ROW] = range(2, n + 2)
    return frame


def _apply(raw: pd.DataFrame, mapping: SourceMapping, **kw: object):  # noqa: ANN202
    return apply_mapping(raw, mapping, CANONICAL, None, data_file="club.csv", mapping_file="club.yaml", **kw)


# The examples of the formats are the ones written in the issue; the locale conventions
# (de_DE decimal comma + dot groups, fr_FR space groups, de_CH apostrophe) are common practice.
@pytest.mark.parametrize(("fmt", "text", "plain"), [
    ("1.234,56", "27,23", "27.23"),
    ("1.234,56", "2.109,19", "2109.19"),
    ("de_DE", "-2.109,19", "-2109.19"),
    ("1 234,56", "1 234,50", "1234.50"),
    ("fr_FR", "1\u202f234,50", "1234.50"),  # narrow no-break space, as French formatting writes it
    ("1'234.56", "1'234.50", "1234.50"),
    ("de_CH", "CHF 12'000.00", "CHF 12000.00"),
    ("1,234.56", "1,234.50", "1234.50"),
    ("1234,56", "12,5 kg", "12.5 kg"),
])
def test_local_formats_become_plain(fmt: str, text: str, plain: str) -> None:
    assert to_plain_numbers(pd.Series([text]), fmt).tolist() == [plain]


@pytest.mark.parametrize(("fmt", "text"), [("1.234,56", "27.23"), ("1,234.56", "27,23"), ("1.234,56", "1.23,4")])
def test_a_number_not_in_the_format_is_not_guessed(fmt: str, text: str) -> None:
    assert to_plain_numbers(pd.Series([text]), fmt).iloc[0].startswith("<unreadable")


def test_unknown_format_names_the_choices() -> None:
    with pytest.raises(ValueError, match="1.234,56"):
        number_format("1-234/56")


@pytest.mark.parametrize(("values", "expected"), [
    (["27,23", "2.109,19", "5", "0,5"], "1.234,56"),
    (["1 234,50", "12,5", "7"], "1 234,56"),
    (["1'234.50", "99.95"], "1'234.56"),
    (["12.50", "1,234.00"], "1,234.56"),
    (["1,234", "3"], "1,234.56"),  # ambiguous '1,234' stays with the default
])
def test_detect_number_format(values: list[str], expected: str) -> None:
    assert detect_number_format(pd.Series(values))[0] == expected


def test_number_format_per_column_and_per_source() -> None:
    raw = _raw(fee=["27,23", "2.109,19", None], kg=["72,5", "80", "64,25 kg"])
    per_column = _mapping({"fee": {"field": "fee", "currency": "EUR", "number_format": "1.234,56"},
                           "kg": {"field": "weight_kg", "unit": "kg", "number_format": "de_DE"}})
    per_source = _mapping({"fee": {"field": "fee", "currency": "EUR"},
                           "kg": {"field": "weight_kg", "unit": "kg"}}, number_format="1.234,56")
    for mapping in (per_column, per_source):
        out = _apply(raw, mapping).frame
        assert out["fee"].tolist()[:2] == [27.23, 2109.19] and pd.isna(out["fee"].iloc[2])
        assert out["weight_kg"].tolist() == [72.5, 80.0, 64.25]


def test_bad_number_format_in_mapping_is_rejected() -> None:
    with pytest.raises(ValueError, match="number format"):
        _mapping({"fee": {"field": "fee", "currency": "EUR", "number_format": "comma"}})


def test_unreadable_share_above_limit_stops_naming_column_count_and_examples() -> None:
    raw = _raw(fee=["27,23", "2.109,19", "12,00", "3,50", "8"])
    mapping = _mapping({"fee": {"field": "fee", "currency": "EUR"}})
    with pytest.raises(InputError) as caught:
        _apply(raw, mapping)
    err = caught.value
    assert err.reason == "too_many_unreadable" and err.column == "fee"
    assert "4 of 5 values" in err.message and "'27,23', '2.109,19', '12,00'" in err.message
    assert 'number_format: "1.234,56"' in (err.hint or "")  # the detected format is proposed
    collected = _apply(raw, mapping, on_error="collect")
    assert [p.reason for p in collected.problems] == ["too_many_unreadable"]


def test_unreadable_share_below_limit_stays_in_failures() -> None:
    values = [f"{i}.50" for i in range(40)] + ["n/a"]  # 1 of 41 = 2.4% < 5%
    raw = _raw(fee=values)
    result = _apply(raw, _mapping({"fee": {"field": "fee", "currency": "EUR"}}))
    assert result.failures["value"].tolist() == ["n/a"] and not result.problems
    with pytest.raises(InputError, match="1 of 41"):  # a stricter limit per source
        _apply(raw, _mapping({"fee": {"field": "fee", "currency": "EUR"}}, max_unreadable=0.01))


def test_unreadable_failures_show_the_value_as_written() -> None:
    raw = _raw(fee=[f"{i},50" for i in range(40)] + ["27.23"])
    result = _apply(raw, _mapping({"fee": {"field": "fee", "currency": "EUR", "number_format": "1.234,56"}}))
    assert result.failures["value"].tolist() == ["27.23"]
    assert "1.234,56" in result.failures["message"].iloc[0]


def test_default_currency_beside_a_currency_column() -> None:
    import decimal

    from integrate.mapping.money import RatesTable

    quotes = pd.DataFrame({"date": pd.to_datetime(["2026-01-30"]), "from": ["GBP"], "to": ["EUR"],
                           "rate": [decimal.Decimal("1.2")], "line": [2]})
    raw = _raw(fee=["10", "10", "10"], cur=["GBP", "", None])
    mapping = _mapping({"fee": {"field": "fee", "currency_column": "cur", "currency": "EUR"}, "cur": "ignore"})
    out = apply_mapping(raw, mapping, CANONICAL, RatesTable(quotes), data_file="club.csv",
                        mapping_file="club.yaml").frame
    assert out["fee"].tolist() == [12.0, 10.0, 10.0]  # blank cells take the declared currency
    without = _mapping({"fee": {"field": "fee", "currency_column": "cur"}, "cur": "ignore"})
    with pytest.raises((InputError, InputErrors)):  # blank currency cells without a fallback stay unreadable
        apply_mapping(raw, without, CANONICAL, RatesTable(quotes), data_file="club.csv", mapping_file="club.yaml")


def test_profile_and_suggest_propose_the_number_format(tmp_path) -> None:  # noqa: ANN001
    from integrate.mapping.profile import profile_column
    from integrate.mapping.suggest import match_columns

    profile = profile_column(pd.Series(["27,23", "2.109,19", "12,00", "1.005,50", "8,10"], name="Beitrag EUR"))
    assert profile.number_format == "1.234,56" and profile.kind() == "number"
    assert profile.numbers == (8.1, 27.23, 2109.19)
    spaced = profile_column(pd.Series(["1 234,50", "12,50", "980,00"], name="montant"))
    assert spaced.number_format == "1 234,56" and spaced.kind() == "number"
    drafted = match_columns([profile_column(pd.Series([f"r{i}" for i in range(5)], name="id")), profile],
                            CANONICAL)
    fee = next(s for s in drafted if s.column == "Beitrag EUR")
    assert fee.field == "fee" and fee.options["number_format"] == "1.234,56"
