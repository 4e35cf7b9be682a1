"""Dates: ISO 8601, Excel serials, explicit formats, two-digit years, and ambiguity."""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.errors import ConversionError
from integrate.mapping.dates import parse_dates


def _parsed(values: list[object], fmt: str | None = None, **options: int) -> list[object]:
    out, _ = parse_dates(pd.Series(values, dtype=object), fmt, **options)
    return [None if pd.isna(v) else v for v in out]


def test_iso_8601_examples() -> None:
    # ISO 8601:2004 uses 1985-04-12 throughout: calendar date, ordinal 1985-102 (section 4.1.3.2) and week
    # date 1985-W15-5 (section 4.1.4.2) are the same day (REFERENCE_CHECKS section 5)
    assert _parsed(["1985-04-12", "1985-102", "1985-W15-5", "1985-04-12T23:20:50"]) == ["1985-04-12"] * 4
    # reduced precision (year, or year and month) stays reduced: ISO 8601 allows YYYY and YYYY-MM
    # (cited from memory)
    assert _parsed(["1985", "1985-04"], "iso") == ["1985", "1985-04"]


def test_iso_impossible_dates_fail() -> None:
    # 2021 is not a leap year, 2000 is (divisible by 400), 1900 is not (Gregorian calendar rule)
    out, failures = parse_dates(pd.Series(["2021-02-29", "2000-02-29", "1900-02-29", "2024-13-01", "2024-04-31"]))
    assert out.tolist()[1] == "2000-02-29"
    assert failures["index"].tolist() == [0, 2, 3, 4]
    assert set(failures["reason"]) == {"bad_date"}


def test_output_is_string_dtype_aligned() -> None:
    values = pd.Series(["2024-01-02", None, "  "], index=["x", "y", "z"], name="born")
    out, failures = parse_dates(values)
    assert str(out.dtype) == "string" and out.name == "born"
    assert out.index.tolist() == ["x", "y", "z"] and out.isna().tolist() == [False, True, True]
    assert failures.empty and list(failures.columns) == ["index", "value", "reason", "message"]


def test_excel_serials() -> None:
    # Excel's 1900 date system counts 1900-01-01 as serial 1 and keeps the nonexistent 1900-02-29 as
    # serial 60, so serial 61 is 1900-03-01 (Microsoft's support article "Excel incorrectly assumes that
    # the year 1900 is a leap year"; cited from memory, and 1900 is not a Gregorian leap year)
    assert _parsed(["1", "59", "61"], "excel") == ["1900-01-01", "1900-02-28", "1900-03-01"]
    # from serial 61 on, serial n = 1899-12-30 + n days; computed here with Python's calendar
    assert (dt.date(1899, 12, 30) + dt.timedelta(days=45658)).isoformat() == "2025-01-01"
    assert _parsed(["45658", "45658.75", 45658.0], "excel") == ["2025-01-01"] * 3
    out, failures = parse_dates(pd.Series(["60", "0", "-3", "soon"]), "excel")
    assert out.isna().all()
    assert failures["reason"].tolist() == ["bad_date"] * 4
    assert "1900-02-29" in failures["message"].iloc[0]


def test_excel_column_with_date_cells_already_iso() -> None:
    # the Excel reader turns date cells into ISO text; a serial column may mix both
    assert _parsed(["2025-01-01", "45659"], "excel") == ["2025-01-01", "2025-01-02"]


def test_year_only() -> None:
    assert _parsed(["1985", "2024", "1985-04-12"], "year") == ["1985", "2024", "1985-04-12"]
    assert _parsed(["1985"], "%Y") == ["1985"]
    out, failures = parse_dates(pd.Series(["85", "nineteen"]), "year")
    assert out.isna().all() and failures["reason"].tolist() == ["bad_date", "bad_date"]


@pytest.mark.parametrize(
    ("fmt", "text"),
    [
        ("%d/%m/%Y", "12/04/1985"),
        ("%m/%d/%Y", "04/12/1985"),
        ("%Y%m%d", "19850412"),
        ("%d.%m.%Y", "12.04.1985"),
        ("%d %b %Y", "12 Apr 1985"),
        ("%d/%m/%Y %H:%M", "12/04/1985 23:20"),
    ],
)
def test_explicit_formats(fmt: str, text: str) -> None:
    assert _parsed([text, "1985-04-12"], fmt) == ["1985-04-12", "1985-04-12"]


def test_explicit_format_rejects_impossible_dates() -> None:
    out, failures = parse_dates(pd.Series(["31/02/2020", "29/02/2020", "12/04/85"]), "%d/%m/%Y")
    assert out.tolist()[1] == "2020-02-29"
    assert failures[["index", "reason"]].values.tolist() == [[0, "bad_date"], [2, "bad_date"]]


def test_month_precision_format() -> None:
    assert _parsed(["04/1985"], "%m/%Y") == ["1985-04"]


def test_two_digit_year_needs_pivot() -> None:
    with pytest.raises(ConversionError) as caught:
        parse_dates(pd.Series(["12.04.85"]), "%d.%m.%y")
    assert (caught.value.reason, caught.value.value) == ("needs_pivot", "%d.%m.%y")


def test_two_digit_pivot() -> None:
    values = ["12.04.85", "01.01.29", "01.01.30", "29.02.00"]
    # pivot 30: yy < 30 -> 20yy, otherwise 19yy; 2000 is a leap year
    assert _parsed(values, "%d.%m.%y", two_digit_pivot=30) == ["1985-04-12", "2029-01-01", "1930-01-01",
                                                               "2000-02-29"]
    # pivot 0: every yy is 19yy, and 1900 has no 29 February (Gregorian rule)
    assert _parsed(values, "%d.%m.%y", two_digit_pivot=0) == ["1985-04-12", "1929-01-01", "1930-01-01", None]


@pytest.mark.parametrize("fmt", ["%d/%m", "%Q/%Y"])
def test_bad_format(fmt: str) -> None:
    with pytest.raises(ConversionError) as caught:
        parse_dates(pd.Series(["01/02"]), fmt)
    assert caught.value.reason == "bad_format"


def test_ambiguous_and_needs_format() -> None:
    out, failures = parse_dates(pd.Series(["03/04/2026", "13/04/2026", "04/13/2026", "04/04/2026", "31/02/2026"]))
    assert out.isna().all()
    assert failures["reason"].tolist() == ["ambiguous_date", "needs_format", "needs_format", "needs_format",
                                           "bad_date"]
    assert "'%d/%m/%Y'" in failures["message"].iloc[0] and "'%m/%d/%Y'" in failures["message"].iloc[0]
    assert "'%d/%m/%Y'" in failures["message"].iloc[1]
    assert "'%m/%d/%Y'" in failures["message"].iloc[2]


def test_132_ambiguous_days_in_a_year() -> None:
    # a/b/yyyy is ambiguous iff a, b <= 12 and a != b: 12 x 12 - 12 = 132 days a year
    # (REFERENCE_CHECKS section 5, enumerated with Python)
    days = pd.date_range("2026-01-01", "2026-12-31", freq="D")
    _, failures = parse_dates(pd.Series(days.strftime("%d/%m/%Y")))
    reasons = failures["reason"].value_counts().to_dict()
    assert reasons == {"ambiguous_date": 132, "needs_format": 365 - 132}


_FORMATS = ["%d/%m/%Y", "%m/%d/%Y", "%Y%m%d", "%d.%m.%Y", "%d %B %Y", "%Y-%m-%d"]


@settings(max_examples=80, deadline=None)
@given(day=st.dates(min_value=dt.date(1, 1, 1), max_value=dt.date(9999, 12, 31)), fmt=st.sampled_from(_FORMATS))
def test_format_round_trip(day: dt.date, fmt: str) -> None:
    # %Y must print four digits for strptime to read it back, so years below 1000 are padded by hand
    text = day.strftime(fmt.replace("%Y", f"{day.year:04d}"))
    assert _parsed([text], fmt) == [day.isoformat()]


@settings(max_examples=60, deadline=None)
@given(day=st.dates(min_value=dt.date(1950, 1, 1), max_value=dt.date(2049, 12, 31)))
def test_two_digit_round_trip(day: dt.date) -> None:
    assert _parsed([day.strftime("%d/%m/%y")], "%d/%m/%y", two_digit_pivot=50) == [day.isoformat()]


@settings(max_examples=150, deadline=None)
@given(texts=st.lists(st.text(max_size=25), max_size=8), fmt=st.sampled_from([None, "excel", "year", "%d/%m/%Y"]))
def test_no_text_crashes(texts: list[str], fmt: str | None) -> None:
    out, failures = parse_dates(pd.Series(texts, dtype=object), fmt)
    assert len(out) == len(texts)
    # every non-blank value either parses or is reported
    blank = pd.Series(texts, dtype=object).str.strip().eq("")
    assert set(failures["index"]) == set(out.index[out.isna() & ~blank])


# date-like text in many layouts, plus noise: what profiling tries every layout on
_DATE_LIKE = st.one_of(
    st.dates(min_value=dt.date(1, 1, 1)).flatmap(lambda d: st.sampled_from([
        d.isoformat(), d.strftime("%d/%m/%Y"), d.strftime("%m/%d/%y"), d.strftime("%d %b %Y"),
        d.strftime("%Y-%j"), d.strftime("%d.%m.%y"), str(d.year)])),
    st.from_regex(r"[0-9]{1,4}[/.\- ][0-9]{1,2}[/.\- ][0-9]{2,4}", fullmatch=True),
    st.sampled_from(["", "  ", "1985-W15-5", "1985-02-30", "0000", "45658", "12.5"]),
    st.text(max_size=8),
)


@settings(max_examples=150, deadline=None)
@given(st.lists(_DATE_LIKE, max_size=12))
def test_readable_dates_agree_with_parse_dates(values: list[str]) -> None:
    from integrate.mapping.dates import readable_dates
    from integrate.mapping.profile import DATE_FORMATS, TWO_DIGIT_PIVOT

    series = pd.Series(values, dtype=object)
    layouts = [(None if f == "iso" else f, TWO_DIGIT_PIVOT if "%y" in f else None) for f in DATE_FORMATS]
    layouts += [("excel", None), ("year", None)]
    for (fmt, pivot), read in zip(layouts, readable_dates(series, layouts)):
        parsed, _ = parse_dates(series, fmt, two_digit_pivot=pivot)
        assert read.tolist() == parsed.notna().tolist(), fmt
