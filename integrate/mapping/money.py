"""Money: ISO 4217 codes and minor units, amount parsing, and dated exchange rates.

A rates table is a CSV the user supplies (``date,from,to,rate``: on ``date``, 1 unit of
``from`` is worth ``rate`` units of ``to``). The rate in force on a day is the latest one
on or before that day, if it is at most ``max_age_days`` old. A pair quoted only the other
way round is used inverted. Results are rounded to the base currency's ISO 4217 minor
units, half up, in decimal arithmetic (so 0.125 EUR rounds to 0.13, as written), or kept
``extra_digits`` finer: the pipeline keeps ``FINE_DIGITS`` more, so that a sum of converted
payments is rounded once per entity, never payment by payment.
"""

from __future__ import annotations

import datetime as dt
import decimal
import re
import unicodedata
from dataclasses import dataclass
from pathlib import Path

import iso4217
import numpy as np
import pandas as pd

from integrate.errors import ConversionError, SourceError

FAILURE_COLUMNS = ["index", "value", "reason", "message"]
RATE_COLUMNS = ["date", "from", "to", "rate", "line"]

FINE_DIGITS = 6  # digits kept beyond the minor unit until a value is merged (a millionth of a cent)
_SHOWN_DATES = 10  # dates listed in a missing-rate message before "... and N more"

# Digits with optional thousands separators (comma, apostrophe) in groups of three.
_AMOUNT = re.compile(r"^(?P<sign>[+-]?)(?P<int>\d{1,3}(?:[,'’]\d{3})+|\d*)(?:\.(?P<frac>\d*))?$", re.ASCII)


def _normalise_code(code: object) -> str:
    return str(code).strip().upper()


def is_currency(code: str) -> bool:
    """True for an ISO 4217 alphabetic code (case and surrounding spaces ignored).

    Example:
        >>> is_currency(" eur "), is_currency("EURO")
        (True, False)
    """
    try:
        iso4217.Currency(_normalise_code(code))
    except ValueError:
        return False
    return True


def minor_units(code: str) -> int:
    """ISO 4217 minor units of a currency (digits after the decimal point).

    Codes whose ISO minor units are "N.A." (gold XAU, special drawing rights XDR, ...)
    raise rather than guess: an amount cannot be rounded in them.

    Raises:
        ConversionError: ``unknown_currency`` for a code outside ISO 4217,
            ``no_minor_units`` for a code without minor units.

    Example:
        >>> minor_units("JPY"), minor_units("eur"), minor_units("BHD")
        (0, 2, 3)
    """
    normal = _normalise_code(code)
    try:
        currency = iso4217.Currency(normal)
    except ValueError as exc:
        raise ConversionError(
            f"'{code}' is not an ISO 4217 currency code",
            value=code,
            reason="unknown_currency",
            hint="use a three-letter code such as EUR, GBP or USD",
        ) from exc
    if currency.exponent is None:
        raise ConversionError(
            f"ISO 4217 gives no minor units for {normal} ({currency.currency_name})",
            value=code,
            reason="no_minor_units",
            hint="choose a base currency that is money with minor units, such as EUR or USD",
        )
    return int(currency.exponent)


def parse_amounts(values: pd.Series) -> tuple[pd.Series, pd.DataFrame]:
    """Amount texts to floats: "1,234.50", "€12.50", "£ 3", "-4.5", "(4.50)" (negative).

    Currency symbols and spaces are ignored; a comma is accepted only as a thousands
    separator (groups of three digits), so "12,50" is a failure rather than a guess.

    Returns:
        Floats aligned with ``values`` (NaN where missing or failed) and a failures frame
        (index, value, reason, message) with reason ``bad_amount``.

    Example:
        >>> amounts, failures = parse_amounts(pd.Series(["1,234.50", "€12.50", None, "12,50"]))
        >>> amounts.tolist()
        [1234.5, 12.5, nan, nan]
        >>> failures["reason"].tolist()
        ['bad_amount']
    """
    if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values.dtype):
        return values.astype("float64"), _no_failures()
    text = values.astype("string").str.strip()
    present = text.notna() & text.ne("").fillna(False).astype(bool)
    parsed = {value: _parse_amount(value) for value in text[present].drop_duplicates()}
    amounts = text.map(parsed).astype("float64")
    amounts.name = values.name
    bad = present & amounts.isna()
    failures = _failure_frame(
        text[bad], "bad_amount", "is not an amount (expected digits with an optional '.', e.g. 1,234.50)"
    )
    return amounts, failures


def _parse_amount(text: str) -> float:
    """One amount text (called once per distinct value); NaN when it is not an amount."""
    kept = "".join(
        ch for ch in text if not ch.isspace() and unicodedata.category(ch) != "Sc"
    )  # drops currency symbols and spaces
    negative = kept.startswith("(") and kept.endswith(")")  # accounting style
    if negative:
        kept = kept[1:-1]
    found = _AMOUNT.match(kept)
    if not found or not (found.group("int") or found.group("frac")):
        return np.nan
    digits = re.sub(r"[,'’]", "", found.group("int")) or "0"
    number = float(f"{found.group('sign')}{digits}.{found.group('frac') or '0'}")
    if negative and number != 0:
        return np.nan if found.group("sign") else -number
    return number


@dataclass(frozen=True)
class RatesTable:
    """Dated exchange rates: on ``date``, 1 ``from`` = ``rate`` ``to``.

    ``quotes`` has columns date (datetime64), from, to (ISO codes), rate (``decimal.Decimal``,
    exact as written) and line (the line in ``file``).
    """

    quotes: pd.DataFrame
    file: str | None = None

    def quotes_for(self, currency: str, base: str) -> pd.DataFrame:
        """Quotes turning ``currency`` into ``base``: direct ones, and inverted reverse ones.

        On a day with both, the direct quote wins. Columns: date, rate (Decimal); sorted by date.
        """
        q = self.quotes
        direct = q[(q["from"] == currency) & (q["to"] == base)][["date", "rate"]].assign(_direct=1)
        reverse = q[(q["from"] == base) & (q["to"] == currency)][["date", "rate"]].assign(_direct=0)
        with decimal.localcontext(decimal.Context(prec=34)):
            reverse["rate"] = reverse["rate"].map({r: 1 / r for r in pd.unique(reverse["rate"])})
        both = pd.concat([direct, reverse], ignore_index=True)
        both = both.sort_values(["date", "_direct"], kind="mergesort").drop_duplicates("date", keep="last")
        return both[["date", "rate"]].reset_index(drop=True)


def load_rates(path: Path) -> RatesTable:
    """Read a rates CSV: header ``date,from,to,rate``; blank lines and ``#`` lines are ignored.

    Raises:
        SourceError: naming the file and the line of the first problem (``missing_file``,
            ``bad_header``, ``bad_row``, ``bad_date``, ``bad_rate``, ``unknown_currency``,
            ``duplicate_rate``); the message counts any further problems.
    """
    shown = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError as exc:
        raise SourceError(
            "currency-rates file not found", file=shown, reason="missing_file",
            hint="check 'rates:' in the canonical schema",
        ) from exc
    except UnicodeDecodeError as exc:
        raise SourceError(
            f"currency-rates file is not UTF-8 ({exc.reason})", file=shown, reason="bad_encoding",
            hint="save the rates file as UTF-8",
        ) from exc
    lines = pd.Series(text.split("\n"), dtype=object).str.strip()
    lines.index = lines.index + 1  # 1-based line numbers
    content = lines[(lines != "") & ~lines.str.startswith("#")]
    header = content.iloc[0] if len(content) else ""
    if [h.strip().lower() for h in header.split(",")] != ["date", "from", "to", "rate"]:
        raise SourceError(
            f"currency-rates header is '{header}'", file=shown,
            line=int(content.index[0]) if len(content) else 1, value=header, reason="bad_header",
            hint="the first line (after # comments) must be: date,from,to,rate",
        )
    body = content.iloc[1:]
    fields = body.str.split(",", expand=True).reindex(columns=range(4))
    width = body.str.count(",") + 1
    problems: list[tuple[int, str, str, str]] = []  # (line, reason, value, message)

    def report(mask: pd.Series, reason: str, shown_values: pd.Series, message: str) -> None:
        problems.extend((int(n), reason, str(shown_values[n]), message) for n in mask.index[mask])

    report(width != 4, "bad_row", body, "does not have 4 fields (date,from,to,rate)")
    fields = fields[width == 4].set_axis(["date", "from", "to", "rate"], axis=1)
    for column in fields.columns:
        fields[column] = fields[column].astype(object).str.strip()
    dates = pd.to_datetime(fields["date"], format="%Y-%m-%d", errors="coerce")
    report(dates.isna(), "bad_date", fields["date"], "is not a date as YYYY-MM-DD")
    known: dict[str, bool] = {}
    for column in ("from", "to"):
        fields[column] = fields[column].str.upper()
        known.update({code: is_currency(code) for code in fields[column].drop_duplicates()})
        report(~fields[column].map(known).eq(True), "unknown_currency", fields[column],
               "is not an ISO 4217 currency code")
    rates = fields["rate"].map({text: _parse_rate(text) for text in fields["rate"].drop_duplicates()})
    report(rates.isna(), "bad_rate", fields["rate"], "is not a positive number")

    quotes = pd.DataFrame(
        {"date": dates, "from": fields["from"], "to": fields["to"], "rate": rates, "line": fields.index}
    )
    valid = quotes["date"].notna() & quotes["rate"].notna()
    valid &= quotes["from"].map(known).eq(True) & quotes["to"].map(known).eq(True)
    quotes = quotes[valid]
    pair_day = ["date", "from", "to"]
    clash = quotes.duplicated(pair_day, keep="first") & ~quotes.duplicated(pair_day + ["rate"], keep="first")
    report(clash, "duplicate_rate", body, "gives another rate for a pair and day an earlier line has")
    if problems:
        problems.sort()
        line, reason, value, message = problems[0]
        others = len(problems) - 1
        more = f" (and {others} more problem{'s' if others > 1 else ''})" if others else ""
        raise SourceError(
            f"'{value}' {message}{more}", file=shown, line=line, value=value, reason=reason,
            hint="each line is date,from,to,rate, e.g. 2024-01-31,USD,EUR,0.9216",
        )
    quotes = quotes.drop_duplicates(pair_day).astype({"line": "int64", "date": "datetime64[ns]"})
    return RatesTable(quotes[RATE_COLUMNS].reset_index(drop=True), file=shown)


def _parse_rate(text: str) -> decimal.Decimal | None:
    try:
        rate = decimal.Decimal(text)
    except decimal.InvalidOperation:
        return None
    return rate if rate.is_finite() and rate > 0 else None


def convert_money(
    amounts: pd.Series,
    currencies: str | pd.Series,
    dates: pd.Series | dt.date,
    base: str,
    rates: RatesTable | None,
    *,
    max_age_days: int = 7,
    extra_digits: int = 0,
) -> tuple[pd.Series, pd.DataFrame]:
    """Convert amounts to ``base`` at the rate in force on each row's date.

    Args:
        amounts: floats (NaN = missing; missing amounts are not failures).
        currencies: one ISO code for all rows, or each row's code.
        dates: the pricing date of each row (ISO text or datetime64), or one date for all.
        base: the ISO code to convert to.
        rates: the rates table (may be None when every amount is already in ``base``).
        max_age_days: how old the latest rate may be on the pricing date.
        extra_digits: decimals kept beyond ``base``'s minor units (0: rounded to them).

    Returns:
        Amounts in ``base`` rounded half up to its minor units plus ``extra_digits`` (float64, aligned with
        ``amounts``), and a failures frame (index, value, reason, message) with reasons
        ``unknown_currency``, ``missing_currency``, ``missing_date``, ``bad_date``,
        ``missing_rate``, ``bad_amount``.

    Raises:
        ConversionError: ``base`` or a single ``currencies`` code is not ISO 4217.

    Example:
        >>> quotes = pd.DataFrame({"date": pd.to_datetime(["2024-01-01"]), "from": ["GBP"],
        ...     "to": ["EUR"], "rate": [decimal.Decimal("1.15")], "line": [2]})
        >>> eur, failures = convert_money(pd.Series([10.0, 2.5, np.nan]), pd.Series(["GBP", "EUR", "GBP"]),
        ...     dt.date(2024, 1, 3), "EUR", RatesTable(quotes))
        >>> eur.tolist()
        [11.5, 2.5, nan]
    """
    base = _normalise_code(base)
    digits = minor_units(base)
    if isinstance(currencies, str):
        minor_units(currencies)  # raises for a code outside ISO 4217
        codes = pd.Series(_normalise_code(currencies), index=amounts.index, dtype=object)
    else:
        codes = currencies.reindex(amounts.index).astype("string").str.strip().str.upper()
        codes = codes.mask(codes.eq("").fillna(False).astype(bool)).astype(object)
    amount_text = amounts.astype(str)
    code_text = codes.astype(str)
    failures: list[pd.DataFrame] = []

    def fail(mask: pd.Series, reason: str, shown: pd.Series, message: pd.Series | str) -> None:
        failures.append(_failure_frame(shown[mask], reason, message))

    finite = pd.Series(np.isfinite(amounts.to_numpy(dtype="float64")), index=amounts.index)
    fail(amounts.notna() & ~finite, "bad_amount", amount_text, "is not a finite amount")
    present = amounts.notna() & finite
    known = codes.map({c: is_currency(c) for c in codes.dropna().drop_duplicates()}).eq(True)
    fail(present & codes.isna(), "missing_currency", amount_text, "has no currency")
    fail(present & codes.notna() & ~known, "unknown_currency", code_text, "is not an ISO 4217 currency code")
    usable = present & known
    foreign = usable & (codes != base)

    days = _pricing_days(dates, amounts.index)
    if isinstance(dates, pd.Series):
        raw_dates = dates.reindex(amounts.index)
        missing = raw_dates.isna() | raw_dates.astype("string").str.strip().eq("").fillna(False).astype(bool)
        fail(foreign & missing, "missing_date", amount_text, "has no date to price it on")
        fail(foreign & ~missing & days.isna(), "bad_date", raw_dates.astype(str), "is not a date as YYYY-MM-DD")
    foreign &= days.notna()

    rate = pd.Series(None, index=amounts.index, dtype=object)
    rate[usable & (codes == base)] = decimal.Decimal(1)
    for currency in pd.unique(codes[foreign]):
        rows = foreign & (codes == currency)
        rate[rows] = _rates_in_force(rates, currency, base, days[rows], max_age_days).to_numpy()
        lacking = rows & rate.isna()
        if lacking.any():
            fail(lacking, "missing_rate", code_text, _missing_rate_message(
                currency, base, days[lacking], max_age_days, rates))
    converted = _multiply_rounded(amounts, rate, digits + extra_digits)
    converted.name = amounts.name
    return converted, _concat(failures)


def _missing_rate_message(
    currency: str, base: str, days: pd.Series, max_age_days: int, rates: RatesTable | None
) -> str:
    distinct = pd.DatetimeIndex(pd.unique(days)).sort_values()
    listed = ", ".join(distinct[:_SHOWN_DATES].strftime("%Y-%m-%d"))
    if len(distinct) > _SHOWN_DATES:
        listed += f" ... and {len(distinct) - _SHOWN_DATES} more"
    limit = ("no rates table is set" if rates is None else
             f"none at most {max_age_days} days old; 'rate_max_age_days' in canonical.yaml allows older ones")
    return f"has no rate for {currency}->{base} ({limit}) on {listed}"


def _pricing_days(dates: pd.Series | dt.date, index: pd.Index) -> pd.Series:
    """Each row's pricing day as datetime64[ns] (NaT when missing or not a date)."""
    if not isinstance(dates, pd.Series):
        day = pd.Timestamp(dates).normalize() if dates is not None else pd.NaT
        return pd.Series(day, index=index).astype("datetime64[ns]")
    dates = dates.reindex(index)
    if pd.api.types.is_datetime64_any_dtype(dates.dtype):
        if dates.dt.tz is not None:
            dates = dates.dt.tz_localize(None)
        return dates.dt.normalize().astype("datetime64[ns]")
    text = dates.astype("string").str.strip()
    distinct = text.dropna().drop_duplicates().astype(object).reset_index(drop=True)
    # ISO dates, alone or followed by a time part (only the date counts)
    iso_form = distinct.str.len().eq(10) | distinct.str.slice(10, 11).isin(["T", " "])
    parsed = pd.to_datetime(distinct.str.slice(0, 10), format="%Y-%m-%d", errors="coerce").where(iso_form)
    return text.map(dict(zip(distinct, parsed))).astype("datetime64[ns]")


def _rates_in_force(
    rates: RatesTable | None, currency: str, base: str, days: pd.Series, max_age_days: int
) -> pd.Series:
    """Rate (Decimal) for each day, or None: the latest quote on or before it, not too old."""
    if rates is None:
        return pd.Series(None, index=days.index, dtype=object)
    quotes = rates.quotes_for(currency, base).astype({"date": "datetime64[ns]"})
    wanted = pd.DataFrame({"date": pd.unique(days)}).astype({"date": "datetime64[ns]"}).sort_values("date")
    matched = pd.merge_asof(
        wanted, quotes, on="date", direction="backward", tolerance=pd.Timedelta(days=max_age_days)
    )
    found = days.map(dict(zip(matched["date"], matched["rate"]))).astype(object)
    return found.where(found.notna(), None)


def _multiply_rounded(amounts: pd.Series, rate: pd.Series, digits: int) -> pd.Series:
    """amount x rate rounded half up to ``digits`` decimals, once per distinct pair.

    An amount enters as its shortest decimal text (2.675, not 2.67499999...), so the
    rounding sees the amount as it was written.
    """
    at = np.flatnonzero((rate.notna() & amounts.notna()).to_numpy())
    pairs = pd.DataFrame({"amount": amounts.to_numpy()[at], "rate": rate.to_numpy()[at]})
    distinct = pairs.drop_duplicates()
    step = decimal.Decimal(1).scaleb(-digits)
    with decimal.localcontext(decimal.Context(prec=34)):
        results = [
            float((decimal.Decimal(repr(float(a))) * r).quantize(step, rounding=decimal.ROUND_HALF_UP))
            for a, r in zip(distinct["amount"], distinct["rate"])
        ]
    joined = pairs.merge(distinct.assign(result=results), on=["amount", "rate"], how="left")
    out = np.full(len(amounts), np.nan)
    out[at] = joined["result"].to_numpy(dtype="float64")
    return pd.Series(out, index=amounts.index, dtype="float64")


def _failure_frame(shown: pd.Series, reason: str, message: pd.Series | str) -> pd.DataFrame:
    """Failure rows for the values in ``shown`` (its index labels the rows); message follows the value."""
    text = shown.astype(str)
    if isinstance(message, pd.Series):
        message = message.reindex(text.index).astype(str)
    return pd.DataFrame(
        {
            "index": text.index,
            "value": text.to_numpy(dtype=object),
            "reason": reason,
            "message": ("'" + text + "' " + message).to_numpy(dtype=object),
        },
        columns=FAILURE_COLUMNS,
    )


def _no_failures() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=object) for c in FAILURE_COLUMNS})


def _concat(parts: list[pd.DataFrame]) -> pd.DataFrame:
    parts = [p for p in parts if len(p)]
    return pd.concat(parts, ignore_index=True) if parts else _no_failures()
