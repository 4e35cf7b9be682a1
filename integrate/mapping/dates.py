"""Dates: export layouts (ISO 8601, strftime formats, Excel serial days, years) to ISO text.

Every layout is parsed once per distinct value. The output is ISO 8601 text: a calendar
date ``YYYY-MM-DD``, or with reduced precision ``YYYY-MM`` / ``YYYY`` when the input holds
no more than that.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from integrate.errors import ConversionError

FAILURE_COLUMNS = ["index", "value", "reason", "message"]

_MONTHS = ("January", "February", "March", "April", "May", "June", "July", "August",
           "September", "October", "November", "December")  # fmt: skip

# Excel's 1900 date system: serial 1 is 1900-01-01, and serial 60 is 1900-02-29, a day
# that never existed (Excel kept Lotus 1-2-3's leap-year bug). From serial 61 (1900-03-01)
# on, serial n is n days after 1899-12-30; before 60, n days after 1899-12-31.
_EXCEL_EPOCH = np.datetime64("1899-12-30", "D")
_EXCEL_PHANTOM = 60  # 1900-02-29
_EXCEL_LAST = 2958465  # 9999-12-31, the last date Excel shows

_ISO_DATE = re.compile(
    r"^(?P<y>\d{4})-(?P<m>\d{2})-(?P<d>\d{2})"
    r"(?:[T ]\d{2}(?::?\d{2}(?::?\d{2}(?:[.,]\d+)?)?)?(?:Z|[+-]\d{2}(?::?\d{2})?)?)?$",
    re.ASCII,
)
_ISO_REDUCED = re.compile(r"^\d{4}(?:-\d{2})?$", re.ASCII)  # YYYY or YYYY-MM
_ISO_ORDINAL = re.compile(r"^(?P<y>\d{4})-(?P<doy>\d{3})$", re.ASCII)  # 1985-102
_ISO_WEEK = re.compile(r"^(?P<y>\d{4})-W(?P<w>\d{2})-(?P<wd>[1-7])$", re.ASCII)  # 1985-W15-5
_DAY_MONTH = re.compile(r"^(?P<a>\d{1,2})(?P<sep>[/.-])(?P<b>\d{1,2})(?P=sep)(?P<y>\d{4}|\d{2})$", re.ASCII)

_DAY_DIRECTIVES = frozenset("dj")
_MONTH_DIRECTIVES = frozenset("mbB")
_YEAR_DIRECTIVES = frozenset("Yy")


@dataclass(frozen=True)
class _Layout:
    """What ``fmt`` asks for, checked once before any value is read."""

    kind: str  # "iso", "excel", "year" or "strftime"
    fmt: str = ""
    precision: str = "day"  # "day", "month" or "year": how much of the date the format holds
    pivot: int | None = None


def parse_dates(
    values: pd.Series, fmt: str | None = None, *, two_digit_pivot: int | None = None
) -> tuple[pd.Series, pd.DataFrame]:
    """Parse dates to ISO 8601 text, one distinct value at a time.

    Values that already are ISO calendar dates (``YYYY-MM-DD``, optionally followed by a
    time part, which is dropped) are accepted whatever ``fmt`` says: the readers turn Excel
    date cells into such text, so one column can mix them with the export's own layout.

    Args:
        values: texts (or numbers, for Excel serials).
        fmt: ``None`` or ``"iso"``: ISO 8601 dates (also ``YYYY``, ``YYYY-MM``, ordinal
            ``YYYY-DDD`` and week dates ``YYYY-Www-D``); ``"excel"``: Excel serial day
            numbers (1900 date system); ``"year"`` or ``"%Y"``: a year alone, output
            ``YYYY``; otherwise a strftime format such as ``"%d/%m/%Y"``. A format
            without a day gives ``YYYY-MM`` or ``YYYY``.
        two_digit_pivot: needed by formats with ``%y``: a two-digit year ``yy`` below the
            pivot is 20yy, otherwise 19yy.

    Returns:
        ISO text (pandas "string", <NA> where missing or failed), aligned with ``values``,
        and a failures frame (index, value, reason, message). Reasons: ``bad_date``; with
        ``fmt=None``, a value shaped ``a/b/yyyy`` gives ``ambiguous_date`` when day and
        month could be swapped (both at most 12 and different) and ``needs_format`` when
        it reads one way only (or both ways alike).

    Raises:
        ConversionError: ``needs_pivot`` for a ``%y`` format without ``two_digit_pivot``;
            ``bad_format`` for a format that cannot be parsed or holds no year.

    Example:
        >>> dates, failures = parse_dates(pd.Series(["1985-04-12", "1985-102", "", "12/04/1985"]))
        >>> dates.tolist()
        ['1985-04-12', '1985-04-12', <NA>, <NA>]
        >>> failures[["index", "reason"]].values.tolist()
        [[3, 'ambiguous_date']]
        >>> parse_dates(pd.Series(["12/04/1985", "45658", "1985-04-12"]), "%d/%m/%Y")[0].tolist()
        ['1985-04-12', <NA>, '1985-04-12']
        >>> parse_dates(pd.Series(["1", "61", "45658"]), "excel")[0].tolist()
        ['1900-01-01', '1900-03-01', '2025-01-01']
        >>> parse_dates(pd.Series(["12.04.85", "01.01.24"]), "%d.%m.%y", two_digit_pivot=30)[0].tolist()
        ['1985-04-12', '2024-01-01']
    """
    layout = _layout(fmt, two_digit_pivot)
    if pd.api.types.is_datetime64_any_dtype(values.dtype):
        text = values.dt.strftime("%Y-%m-%d").astype("string")
        return text.rename(values.name), _failure_frame(pd.Series(dtype=object), pd.Series(dtype=object))
    text = values.astype("string").str.strip()
    text = text.mask(text.eq("").fillna(False).astype(bool))
    # drop_duplicates, not pd.unique: pd.unique treats "1\x00" as "1"
    distinct = text.dropna().drop_duplicates().astype(object).reset_index(drop=True)
    parsed, reasons, messages = _parse_distinct(distinct, layout)
    out = text.map(dict(zip(distinct, parsed))).astype("string").rename(values.name)
    reason = text.map(dict(zip(distinct, reasons)))
    failed = reason.notna()
    message = "'" + text[failed].astype(str) + "' " + text[failed].map(dict(zip(distinct, messages)))
    failures = _failure_frame(text[failed].astype(str), reason[failed], message)
    return out, failures


def _layout(fmt: str | None, pivot: int | None) -> _Layout:
    if fmt is None or fmt.strip().lower() == "iso":
        return _Layout("iso")
    if fmt.strip().lower() == "excel":
        return _Layout("excel")
    if fmt.strip().lower() == "year" or fmt.strip() == "%Y":
        return _Layout("year", precision="year")
    directives = set(re.findall(r"%(.)", fmt))  # "%%" comes out as "%", a literal
    if not directives & _YEAR_DIRECTIVES:
        raise ConversionError(
            f"date format '{fmt}' has no year (%Y or %y)", value=fmt, reason="bad_format",
            hint="give a strftime format with a year, e.g. %d/%m/%Y, or 'iso', 'excel', 'year'",
        )
    if "y" in directives:
        if pivot is None:
            raise ConversionError(
                f"date format '{fmt}' has a two-digit year (%y), so it needs a pivot year",
                value=fmt, reason="needs_pivot",
                hint="set `two_digit_pivot` (e.g. 30: 29 -> 2029, 30 -> 1930) or use %Y",
            )
        if not 0 <= pivot <= 100:
            raise ConversionError(
                f"two-digit pivot {pivot} is not between 0 and 100", value=pivot, reason="bad_format",
                hint="a pivot P reads yy < P as 20yy and the rest as 19yy",
            )
    sample = dt.datetime(2001, 2, 3, 4, 5, 6)
    try:
        dt.datetime.strptime(sample.strftime(fmt), fmt)
    except ValueError as exc:
        raise ConversionError(
            f"date format '{fmt}' cannot be read back: {exc}", value=fmt, reason="bad_format",
            hint="use strftime codes such as %d, %m, %Y, %y, %b",
        ) from exc
    precision = "day" if directives & _DAY_DIRECTIVES else "month" if directives & _MONTH_DIRECTIVES else "year"
    return _Layout("strftime", fmt=fmt, precision=precision, pivot=pivot)


def _parse_distinct(distinct: pd.Series, layout: _Layout) -> tuple[pd.Series, pd.Series, pd.Series]:
    """ISO text, failure reason and message (after the quoted value) for each distinct value."""
    iso = pd.Series(pd.NA, index=distinct.index, dtype=object)
    reason = pd.Series(None, index=distinct.index, dtype=object)
    message = pd.Series(None, index=distinct.index, dtype=object)
    if distinct.empty:
        return iso, reason, message

    calendar, calendar_ok, shaped = _iso_calendar(distinct)
    iso[calendar_ok] = calendar[calendar_ok]
    reason[shaped & ~calendar_ok] = "bad_date"
    message[shaped & ~calendar_ok] = "is not a real date"
    rest = ~shaped
    iso[rest] = _parse_other(distinct[rest], layout)

    undone = rest & iso.isna()
    reason[undone] = "bad_date"
    message[undone] = _expected(layout)
    if layout.kind == "iso":
        day_month = distinct[undone].str.extract(_DAY_MONTH)
        for at, row in day_month.dropna(subset=["a"]).iterrows():  # a handful of distinct values
            reason[at], message[at] = _day_month_failure(int(row["a"]), int(row["b"]), row["y"], row["sep"])
    return iso, reason, message


def readable_dates(values: pd.Series, formats: list[tuple[str | None, int | None]]) -> list[np.ndarray]:
    """For each (format, two-digit pivot): which values ``parse_dates`` reads in that format.

    The same answers as ``parse_dates(values, fmt, two_digit_pivot=pivot)[0].notna()`` for each,
    with the work that does not depend on the format (stripping, distinct values, ISO calendar
    dates) done once: profiling tries a dozen layouts on every column.

    Raises:
        ConversionError: as ``parse_dates`` does for a bad format.

    Example:
        >>> [m.tolist() for m in readable_dates(pd.Series(["13/04/1985", "1985-04-12", ""]),
        ...                                     [("iso", None), ("%d/%m/%Y", None), ("%m/%d/%Y", None)])]
        [[False, True, False], [True, True, False], [False, True, False]]
    """
    layouts = [_layout(fmt, pivot) for fmt, pivot in formats]
    if pd.api.types.is_datetime64_any_dtype(values.dtype):
        return [values.notna().to_numpy(dtype=bool) for _ in layouts]
    text = values.astype("string").str.strip()
    text = text.mask(text.eq("").fillna(False).astype(bool))
    distinct = text.dropna().drop_duplicates().astype(object).reset_index(drop=True)
    if distinct.empty:
        return [np.zeros(len(values), dtype=bool) for _ in layouts]
    _, calendar_ok, shaped = _iso_calendar(distinct)
    rest = ~shaped.to_numpy(dtype=bool)
    others = distinct[rest]
    out = []
    for layout in layouts:
        read = calendar_ok.to_numpy(dtype=bool, copy=True)
        if len(others):
            read[rest] = _parse_other(others, layout).notna().to_numpy(dtype=bool)
        out.append(text.map(dict(zip(distinct, read))).eq(True).to_numpy(dtype=bool))
    return out


def _parse_other(values: pd.Series, layout: _Layout) -> pd.Series:
    """ISO text (or a missing value) for distinct values that are not ISO calendar dates."""
    if layout.kind == "iso":
        return _iso_other(values)
    if layout.kind == "year":
        out = pd.Series(pd.NA, index=values.index, dtype=object)
        year = values.str.fullmatch(r"\d{4}") & values.ne("0000")
        out[year] = values[year]
        return out
    if layout.kind == "excel":
        return _excel_serials(values)
    return values.map(lambda v: _strptime_one(v, layout))  # once per distinct value


def _iso_calendar(distinct: pd.Series) -> tuple[pd.Series, pd.Series, pd.Series]:
    """``YYYY-MM-DD`` (time part dropped), whether it is a real date (checked vectorised), and
    whether the value is shaped as an ISO calendar date at all."""
    parts = distinct.str.extract(_ISO_DATE)[["y", "m", "d"]]
    y, m, d = (pd.to_numeric(parts[c], errors="coerce").fillna(0).astype("int64") for c in ("y", "m", "d"))
    shaped = parts["y"].notna()
    real = _is_real_date(y, m, d) & shaped
    return distinct.str.slice(0, 10), real, shaped


def _is_real_date(y: pd.Series, m: pd.Series, d: pd.Series) -> pd.Series:
    leap = (y % 4 == 0) & ((y % 100 != 0) | (y % 400 == 0))
    lengths = np.array([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])
    month_days = pd.Series(lengths[m.clip(0, 12).to_numpy()], index=m.index) + (leap & (m == 2))
    return (y >= 1) & m.between(1, 12) & (d >= 1) & (d <= month_days)


def _iso_other(values: pd.Series) -> pd.Series:
    """ISO 8601 forms other than YYYY-MM-DD: reduced precision, ordinal and week dates."""
    out = pd.Series(pd.NA, index=values.index, dtype=object)
    reduced = values.str.match(_ISO_REDUCED)
    year = pd.to_numeric(values.str.slice(0, 4), errors="coerce")
    month = pd.to_numeric(values.str.slice(5, 7), errors="coerce")
    ok = reduced & (year >= 1) & ((values.str.len() == 4) | month.between(1, 12))
    out[ok] = values[ok]
    others = values[~reduced]
    if len(others):  # rare forms, once per distinct value
        out[others.index] = [_ordinal_or_week(v) for v in others]
    return out


def _ordinal_or_week(value: str) -> str | None:
    try:
        if found := _ISO_ORDINAL.match(value):
            year, day = int(found["y"]), int(found["doy"])
            start = dt.date(year, 1, 1)
            date = start + dt.timedelta(days=day - 1)
            return date.isoformat() if day >= 1 and date.year == year else None
        if found := _ISO_WEEK.match(value):
            return dt.date.fromisocalendar(int(found["y"]), int(found["w"]), int(found["wd"])).isoformat()
    except (ValueError, OverflowError):
        return None
    return None


def _excel_serials(values: pd.Series) -> pd.Series:
    """Excel serial day numbers (a fraction is a time of day, dropped) to ISO dates."""
    serial = pd.to_numeric(values, errors="coerce")
    day = np.floor(serial.to_numpy(dtype="float64"))
    ok = np.isfinite(day) & (day >= 1) & (day <= _EXCEL_LAST) & (day != _EXCEL_PHANTOM)
    days = np.where(ok, day, 0).astype("int64")
    days = np.where(days < _EXCEL_PHANTOM, days + 1, days)  # before the phantom day, one day later epoch
    text = np.datetime_as_string(_EXCEL_EPOCH + days.astype("timedelta64[D]"), unit="D")
    return pd.Series(np.where(ok, text, None), index=values.index, dtype=object)


def _strptime_one(value: str, layout: _Layout) -> str | None:
    """One value in a strftime layout, with the two-digit-year pivot applied."""
    try:
        parsed = dt.datetime.strptime(value, layout.fmt).date()
        if layout.pivot is not None:
            # strptime reads %y as 1969-2068; the pivot decides the century instead
            two_digits = parsed.year % 100
            parsed = parsed.replace(year=(2000 if two_digits < layout.pivot else 1900) + two_digits)
    except ValueError:
        return None
    text = parsed.isoformat()
    return text[:4] if layout.precision == "year" else text[:7] if layout.precision == "month" else text


def _expected(layout: _Layout) -> str:
    if layout.kind == "iso":
        return "is not an ISO 8601 date (YYYY-MM-DD); set `format` for other layouts"
    if layout.kind == "excel":
        return (
            f"is not an Excel serial day number (1 to {_EXCEL_LAST}; {_EXCEL_PHANTOM} is 1900-02-29, "
            "a day that does not exist)"
        )
    if layout.kind == "year":
        return "is not a year (YYYY)"
    return f"is not a date in format '{layout.fmt}'"


def _day_month_failure(a: int, b: int, year: str, sep: str) -> tuple[str, str]:
    """Reason and message for an ``a/b/yyyy`` value read without a format."""
    y = "%Y" if len(year) == 4 else "%y"
    day_first, month_first = f"%d{sep}%m{sep}{y}", f"%m{sep}%d{sep}{y}"
    full_year = int(year) if len(year) == 4 else 2000 + int(year)  # any leap year test will do
    day_first_ok = _is_real(full_year, b, a)
    month_first_ok = _is_real(full_year, a, b)
    if day_first_ok and month_first_ok and a != b:
        return "ambiguous_date", (
            f"could be {a} {_MONTHS[b - 1]} or {b} {_MONTHS[a - 1]}: "
            f"set `format` to '{day_first}' or '{month_first}'"
        )
    if day_first_ok:
        return "needs_format", f"is not ISO 8601: set `format` to '{day_first}'"
    if month_first_ok:
        return "needs_format", f"is not ISO 8601: set `format` to '{month_first}'"
    return "bad_date", "is not a real date in either day/month order"


def _is_real(year: int, month: int, day: int) -> bool:
    try:
        dt.date(year, month, day)
    except ValueError:
        return False
    return True


def _failure_frame(shown: pd.Series, reasons: pd.Series, message: pd.Series | None = None) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "index": shown.index,
            "value": shown.to_numpy(dtype=object),
            "reason": reasons.to_numpy(dtype=object),
            "message": (message if message is not None else shown).to_numpy(dtype=object),
        },
        columns=FAILURE_COLUMNS,
    )
