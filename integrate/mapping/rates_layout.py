"""The rates table in the user's own layout, declared under ``rates_layout:`` in canonical.yaml.

Two layouts are read (besides the built-in ``date,from,to,rate`` file, used when no layout is
given):

- ``long``: one row per date and currency, with columns for the date, the currency, optionally the
  target currency (default: the base currency) and the rate;
- ``wide``: one row per date and one column per currency (headers are the ISO 4217 codes, or the
  columns listed under ``currencies``), all against one target currency.

``direction`` says which way a rate goes: ``to_target`` (1 currency = rate target, the default)
or ``from_target`` (1 target = rate currency, as central banks quote a base currency against
others). Dates and numbers may be in local formats (``date_format``, ``number_format``). The rate
on a pricing date is the latest one on or before it, at most ``rate_max_age_days`` old; a pricing
date with none stops the run, listing the dates.
"""

from __future__ import annotations

import decimal
from pathlib import Path

import pandas as pd

from ..errors import SourceError
from .dates import parse_dates
from .money import RATE_COLUMNS, RatesTable, is_currency, load_rates
from .numbers import to_plain_numbers
from .spec import CanonicalSchema, RatesLayout


def load_workspace_rates(canonical: CanonicalSchema, path: Path, shown: str | None = None) -> RatesTable:
    """The workspace's rates table, in its declared layout (or the built-in one)."""
    if canonical.rates_layout is None:
        return load_rates(path)
    return load_rates_in_layout(path, canonical.rates_layout, canonical.base_currency, shown or str(path))


def _error(message: str, shown: str, line: int | None, value: object, reason: str, hint: str) -> SourceError:
    return SourceError(message, file=shown, line=line, value=None if value is None else str(value), reason=reason,
                       hint=hint)


def load_rates_in_layout(path: Path, layout: RatesLayout, base: str, shown: str) -> RatesTable:
    """Read a rates file in ``layout``.

    Raises:
        SourceError: naming the file, the line and the column of the first problem
            (``missing_file``, ``missing_column``, ``bad_date``, ``bad_rate``, ``unknown_currency``,
            ``duplicate_rate``).
    """
    try:
        frame = pd.read_csv(path, dtype=str, sep=layout.delimiter, encoding=layout.encoding, comment="#",
                            skip_blank_lines=True, keep_default_na=False)
    except FileNotFoundError as exc:
        raise _error("currency-rates file not found", shown, None, None, "missing_file",
                     "check 'rates:' in the canonical schema") from exc
    except (UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise _error(f"currency-rates file cannot be read ({exc})", shown, None, None, "bad_file",
                     "check 'rates_layout' (delimiter, encoding)") from exc
    frame.columns = [str(c).strip() for c in frame.columns]
    frame["_line"] = range(2, len(frame) + 2)  # header on line 1 (comment lines are not counted)
    needed = [layout.date] + ([layout.currency, layout.rate] if layout.layout == "long" else [])
    if layout.target:
        needed.append(layout.target)
    missing = [c for c in needed if c and c not in frame.columns]
    if missing:
        raise _error(f"rates column '{missing[0]}' is not in the file", shown, 1, missing[0], "missing_column",
                     "columns in the file: " + ", ".join(c for c in frame.columns if c != "_line"))
    if layout.layout == "wide":
        codes = layout.currencies or [c for c in frame.columns if c not in (layout.date, "_line")]
        unknown = [c for c in codes if c not in frame.columns or not is_currency(c)]
        if unknown:
            raise _error(f"rates column '{unknown[0]}' is not an ISO 4217 currency code in the file", shown, 1,
                         unknown[0], "unknown_currency", "list the currency columns under 'currencies'")
        long = frame.melt(id_vars=[layout.date, "_line"], value_vars=codes, var_name="_currency", value_name="_rate")
        long = long[long["_rate"].str.strip() != ""]
        target = pd.Series(layout.target_currency or base, index=long.index)
        currency, rate, date_text = long["_currency"], long["_rate"], long[layout.date]
    else:
        long = frame
        currency, rate, date_text = long[layout.currency], long[layout.rate], long[layout.date]
        target = long[layout.target] if layout.target else pd.Series(layout.target_currency or base,
                                                                     index=long.index)
    lines = long["_line"]
    dates, failures = parse_dates(date_text.str.strip(), layout.date_format)
    if not failures.empty:
        at = failures["index"].iloc[0]
        raise _error(f"'{date_text[at]}' is not a date" + (f" as {layout.date_format}" if layout.date_format else ""),
                     shown, int(lines[at]), date_text[at], "bad_date", "set 'date_format' under rates_layout")
    currency = currency.str.strip().str.upper()
    target = target.astype(str).str.strip().str.upper()
    for codes in (currency, target):
        bad = ~codes.map({c: is_currency(c) for c in codes.unique()}).astype(bool)
        if bad.any():
            at = bad.idxmax()
            raise _error(f"'{codes[at]}' is not an ISO 4217 currency code", shown, int(lines[at]), codes[at],
                         "unknown_currency", "use three-letter codes such as EUR, GBP, USD")
    plain = to_plain_numbers(rate.str.strip(), layout.number_format)
    values = plain.map({t: _rate(t) for t in plain.unique()})
    if values.isna().any():
        at = values.isna().idxmax()
        raise _error(f"'{rate[at]}' is not a positive rate", shown, int(lines[at]), rate[at], "bad_rate",
                     "set 'number_format' under rates_layout if the rates use a decimal comma")
    if layout.direction == "from_target":  # 1 target = rate currency: the quote is target -> currency
        currency, target = target, currency
    quotes = pd.DataFrame({"date": pd.to_datetime(dates, format="ISO8601"), "from": currency.to_numpy(),
                           "to": target.to_numpy(), "rate": values.to_numpy(), "line": lines.to_numpy()})
    pair_day = ["date", "from", "to"]
    clash = quotes.duplicated(pair_day, keep="first") & ~quotes.duplicated(pair_day + ["rate"], keep="first")
    if clash.any():
        at = clash.idxmax()
        raise _error(f"another rate for {quotes['from'][at]}->{quotes['to'][at]} on "
                     f"{quotes['date'][at]:%Y-%m-%d} than an earlier line gives", shown, int(quotes["line"][at]),
                     rate.iloc[at], "duplicate_rate", "keep one rate per currency pair and day")
    quotes = quotes.drop_duplicates(pair_day).astype({"line": "int64", "date": "datetime64[ns]"})
    return RatesTable(quotes[RATE_COLUMNS].reset_index(drop=True), file=shown)


def _rate(text: object) -> decimal.Decimal | None:
    try:
        value = decimal.Decimal(str(text))
    except decimal.InvalidOperation:
        return None
    return value if value.is_finite() and value > 0 else None
