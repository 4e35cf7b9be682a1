"""Profile the columns of a new export: what kind of values, how many empty, how many distinct, examples.

Every pattern is tested once per distinct value. The profile feeds ``suggest``, which matches
columns to canonical fields; it is also printed, so the person drafting a mapping sees what
the export holds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from ..columns import ROW
from .dates import readable_dates
from .money import parse_amounts
from .numbers import DEFAULT, detect_number_format, to_plain_numbers

# Patterns of values found in exports (common practice; deliberately loose: they rank guesses).
_EMAIL = r"[^@\s]+@[^@\s]+\.[A-Za-z]{2,}"
_PHONE_TEXT = r"\+?[\d\s().\-/]{7,}"
_POSTCODES = (
    r"[A-Z]{1,2}\d[A-Z\d]?\s*\d[A-Z]{2}",  # UK
    r"\d{5}(?:-\d{4})?",  # US ZIP, DE, FR
    r"\d{4}\s?[A-Z]{2}",  # NL
    r"[A-Z]\d[A-Z]\s?\d[A-Z]\d",  # CA
)
_NAME = r"[^\W\d_][^\W\d_'’ .\-]*(?:[ ,'’.\-]+[^\W\d_]+)*\.?"
_STREET = r"\d+[A-Za-z]?,?\s+[^\W\d_].*"
_CODE = r"[A-Z]{3}"

# Date layouts tried on columns that look like dates, most specific first.
DATE_FORMATS = ("iso", "%d/%m/%Y", "%m/%d/%Y", "%d.%m.%Y", "%d-%m-%Y", "%Y/%m/%d", "%d %b %Y", "%d %B %Y",
                "%b %d, %Y", "%d/%m/%y", "%m/%d/%y", "%d.%m.%y")
_DATE_SAMPLE = 5000  # distinct values tried against each date layout
TWO_DIGIT_PIVOT = 30  # proposed for %y layouts: 00-29 -> 20yy, 30-99 -> 19yy (to be confirmed by the user)


@dataclass
class ColumnProfile:
    """What one column holds."""

    name: str
    count: int  # rows
    empty: int  # rows without a value
    distinct: int
    examples: list[str]
    shares: dict[str, float] = field(default_factory=dict)  # pattern -> share of non-empty values
    numbers: tuple[float, float, float] | None = None  # min, median, max of the values read as numbers
    date_formats: dict[str, float] = field(default_factory=dict)  # layout -> share of values it reads
    symbols: str = ""  # currency symbols seen in the values
    number_format: str | None = None  # a local number format the values are written in ('1.234,56')
    codes: list[str] = field(default_factory=list)  # every distinct value, when there are at most 12
    code_counts: dict[str, int] = field(default_factory=dict)  # rows holding each of ``codes``, same order
    decimals: dict[int, float] = field(default_factory=dict)  # decimal places (3 = three or more) -> share
    samples: list[str] = field(default_factory=list)  # up to 50 distinct values, most frequent first

    @property
    def empty_rate(self) -> float:
        return self.empty / self.count if self.count else 1.0

    @property
    def is_unique(self) -> bool:
        return self.empty == 0 and self.distinct == self.count and self.count > 0

    def share(self, pattern: str) -> float:
        return self.shares.get(pattern, 0.0)

    def best_date_format(self) -> tuple[str | None, float, list[str]]:
        """The layout reading most values, its share, and the other layouts reading as many."""
        if not self.date_formats:
            return None, 0.0, []
        best = max(self.date_formats.values())
        tied = [f for f, s in self.date_formats.items() if s == best]
        return tied[0], best, tied[1:]

    def kind(self) -> str:
        """A one-word summary: empty, email, phone, postcode, date, number, code, name, text."""
        if self.count == self.empty:
            return "empty"
        for pattern in ("email", "date", "postcode", "phone", "number", "code", "name"):
            if self.share(pattern) >= 0.9 or (pattern == "date" and self.best_date_format()[1] >= 0.9):
                return pattern
        return "text"

    def summary(self) -> str:
        text = f"{self.kind()}, {self.empty_rate:.0%} empty, {self.distinct} distinct"
        if self.numbers and self.kind() == "number":
            text += f", {self.numbers[0]:g} to {self.numbers[2]:g} (median {self.numbers[1]:g})"
            if self.number_format:
                text += f" written {self.number_format}"
        if self.examples:
            text += ", e.g. " + ", ".join(repr(e) for e in self.examples[:3])
        return text


def _share(distinct: pd.Series, weights: pd.Series, mask: pd.Series) -> float:
    total = weights.sum()
    return float(weights[mask].sum() / total) if total else 0.0


def profile_column(values: pd.Series) -> ColumnProfile:
    """Profile one column of text values."""
    text = values.astype("string").str.strip()
    present = text[text.notna() & text.ne("")]
    counts = present.value_counts(sort=False)
    distinct = pd.Series(counts.index.astype(str), dtype=object)
    weights = pd.Series(counts.to_numpy(), dtype="float64")
    profile = ColumnProfile(str(values.name), len(values), len(values) - len(present), len(counts),
                            list(present.drop_duplicates().head(3)))
    if distinct.empty:
        return profile
    if len(counts) <= 12:
        ranked = counts.sort_values(ascending=False, kind="mergesort")
        profile.codes = [str(v) for v in ranked.index]
        profile.code_counts = {str(v): int(n) for v, n in ranked.items()}
    profile.samples = [str(v) for v in counts.sort_values(ascending=False, kind="mergesort").index[:50]]
    s = distinct.str
    digits = s.replace(r"\D", "", regex=True).str.len()
    profile.shares = {
        "email": _share(distinct, weights, s.fullmatch(_EMAIL)),
        "phone": _share(distinct, weights, s.fullmatch(_PHONE_TEXT) & digits.between(7, 15)),
        "postcode": _share(distinct, weights, pd.concat([s.upper().str.fullmatch(p) for p in _POSTCODES],
                                                        axis=1).any(axis=1)),
        "name": _share(distinct, weights, s.fullmatch(_NAME) & ~s.contains("@")),
        "street": _share(distinct, weights, s.fullmatch(_STREET)),
        "code": _share(distinct, weights, s.fullmatch(_CODE)),
    }
    amounts, _ = parse_amounts(distinct)
    if amounts.notna().mean() < 0.9 and s.contains(r"\d[,. '’\u00a0\u202f]\d").any():
        fmt, share = detect_number_format(distinct)
        if fmt != DEFAULT and share >= 0.9:  # decimal commas and the like: read the values in that format
            local, _ = parse_amounts(to_plain_numbers(distinct, fmt).astype(object))
            if local.notna().sum() > amounts.notna().sum():
                amounts, profile.number_format = local, fmt
    # digits split by spaces are a phone number or a code, not an amount
    spaced = s.contains(r"\d\s+\d") & (not (profile.number_format or "").startswith("1 "))
    read = amounts.notna() & ~spaced
    profile.shares["number"] = _share(distinct, weights, read)
    if read.any():
        profile.decimals = _decimal_shares(distinct[read], weights[read], profile.number_format)
    if amounts.notna().any():
        numbers = amounts.repeat(weights.astype(int).to_numpy()).dropna()
        profile.numbers = (float(numbers.min()), float(numbers.median()), float(numbers.max()))
    profile.symbols = "".join(sorted({ch for ch in "".join(distinct.head(200)) if ch in "€£$¥"}))
    has_digits = _share(distinct, weights, digits > 0)
    if has_digits >= 0.5 and (profile.shares["number"] < 0.9 or s.fullmatch(r"\d{4}").all()):
        profile.date_formats = _date_shares(distinct.head(_DATE_SAMPLE), weights.head(_DATE_SAMPLE))
    return profile


def _decimal_shares(distinct: pd.Series, weights: pd.Series, number_format: str | None) -> dict[int, float]:
    """Share of the values by decimal places written (3 stands for three or more)."""
    plain = to_plain_numbers(distinct, number_format).astype("string") if number_format else distinct.astype("string")
    places = plain.str.extract(r"\.(\d+)\D*$", expand=False).str.len().fillna(0).clip(upper=3).astype(int)
    return {int(n): _share(distinct, weights, places.eq(n).to_numpy()) for n in sorted(places.unique())}


def _date_shares(distinct: pd.Series, weights: pd.Series) -> dict[str, float]:
    shares: dict[str, float] = {}
    if distinct.str.fullmatch(r"(?:19|20)\d\d").all():
        return {"year": 1.0}
    layouts = [(None if fmt == "iso" else fmt, TWO_DIGIT_PIVOT if "%y" in fmt else None) for fmt in DATE_FORMATS]
    for fmt, read in zip(DATE_FORMATS, readable_dates(distinct, layouts)):
        share = _share(distinct, weights, read)
        if share > 0:
            shares[fmt] = share
    return shares


def profile_frame(raw: pd.DataFrame) -> list[ColumnProfile]:
    """Profile every column of a source frame (as read by ``integrate.sources``)."""
    return [profile_column(raw[c]) for c in raw.columns if c != ROW]
