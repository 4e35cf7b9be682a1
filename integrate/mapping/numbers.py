"""Numbers written in local formats: decimal comma, and dots, spaces or apostrophes between thousands.

A number format is written as the number one thousand two hundred thirty-four and 56 hundredths
looks in it: ``"1,234.56"`` (the default), ``"1.234,56"``, ``"1 234,56"``, ``"1'234.56"``,
``"1234,56"``; or as a locale name (``de_DE``, ``fr_FR``, ``de_CH``...), looked up in a small table
of the conventions those locales use (common practice, recalled from memory; CLDR is the
standard reference for them). Values are rewritten to plain ``1234.56`` before the money and
quantity parsers read them, once per distinct value; a value whose digits do not fit the declared
format is left unreadable (it becomes a failure), never guessed.
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass

import pandas as pd

_SPACES = " \u00a0\u202f"  # space, no-break space, narrow no-break space (French grouping)


@dataclass(frozen=True)
class NumberFormat:
    """The decimal mark and the thousands separators accepted."""

    decimal: str
    groups: str  # every character accepted between groups of three digits ("" = no grouping)
    label: str

    @functools.cached_property
    def pattern(self) -> re.Pattern[str]:
        dec = re.escape(self.decimal)
        if self.groups:
            sep = "[" + re.escape(self.groups) + "]"
            whole = rf"(?:\d{{1,3}}(?:{sep}\d{{3}})+|\d+)"
        else:
            whole = r"\d+"
        return re.compile(rf"^{whole}(?:{dec}\d+)?$|^{dec}\d+$")


# The format names users write, and what they mean.
_FORMATS: dict[str, NumberFormat] = {
    "1,234.56": NumberFormat(".", ",", "1,234.56"),
    "1234.56": NumberFormat(".", "", "1234.56"),
    "1.234,56": NumberFormat(",", ".", "1.234,56"),
    "1234,56": NumberFormat(",", "", "1234,56"),
    "1 234,56": NumberFormat(",", _SPACES, "1 234,56"),
    "1 234.56": NumberFormat(".", _SPACES, "1 234.56"),
    "1'234.56": NumberFormat(".", "'’", "1'234.56"),
    "1'234,56": NumberFormat(",", "'’", "1'234,56"),
}

# Locale conventions (recalled from memory, common practice; CLDR holds the authoritative table).
_LOCALES: dict[str, str] = {
    **dict.fromkeys(["en", "en_gb", "en_us", "en_ie", "en_au", "en_ca", "ja_jp", "zh_cn"], "1,234.56"),
    **dict.fromkeys(["de", "de_de", "de_at", "nl", "nl_nl", "nl_be", "it", "it_it", "es", "es_es", "da_dk",
                     "id_id", "pt_br", "tr_tr"], "1.234,56"),
    **dict.fromkeys(["fr", "fr_fr", "fr_be", "fr_ca", "sv_se", "fi_fi", "nb_no", "pl_pl", "cs_cz", "ru_ru",
                     "pt_pt", "uk_ua", "hu_hu", "sk_sk"], "1 234,56"),
    **dict.fromkeys(["de_ch", "fr_ch", "it_ch", "de_li"], "1'234.56"),
}

FORMAT_NAMES = tuple(_FORMATS)
DEFAULT = "1,234.56"


def number_format(name: str) -> NumberFormat:
    """The format a ``number_format`` setting names (a pattern or a locale).

    Raises:
        ValueError: the name is neither a known pattern nor a known locale.

    Example:
        >>> number_format("de_DE").label, number_format("1 234,56").decimal
        ('1.234,56', ',')
    """
    text = name.strip()
    if text in _FORMATS:
        return _FORMATS[text]
    key = text.lower().replace("-", "_").split(".", 1)[0]  # de-DE, de_DE.UTF-8
    if key in _LOCALES:
        return _FORMATS[_LOCALES[key]]
    raise ValueError(
        f"number format '{name}' is not known: write how 1234.56 looks ("
        + ", ".join(f"'{f}'" for f in _FORMATS) + ") or a locale such as de_DE, fr_FR, de_CH"
    )


# A run of digits and the marks that can sit between them, with an optional sign before it.
_SPAN = re.compile(r"[+-]?(?:\d[\d.,'’ \u00a0\u202f]*\d|\d)|[+-]?[.,]\d+")


def _rewrite(text: str, fmt: NumberFormat) -> str | None:
    """``text`` with its number in plain form (1234.56); None when the number does not fit ``fmt``."""
    found = _SPAN.search(text)
    if not found:
        return text  # no number at all: the parser after us reports it
    span = found.group(0)
    sign = span[0] if span[0] in "+-" else ""
    body = span[len(sign):]
    if not fmt.pattern.match(body):
        return None
    whole, _, frac = body.partition(fmt.decimal)
    for ch in fmt.groups:
        whole = whole.replace(ch, "")
    plain = sign + (whole or "0") + ("." + frac if frac else "")
    return text[: found.start()] + plain + text[found.end():]


def to_plain_numbers(values: pd.Series, fmt: NumberFormat | str | None) -> pd.Series:
    """Rewrite number texts in ``fmt`` to plain ``1234.56`` (units and symbols around them kept).

    Values whose digits do not fit the format become ``<unreadable: value>`` so that the parser
    reading them next fails on them (and the failure shows the value). Numbers stay as they are.

    Example:
        >>> to_plain_numbers(pd.Series(["2.109,19", "27,23 kg", "€ 1.234", None]), "1.234,56").tolist()
        ['2109.19', '27.23 kg', '€ 1234', <NA>]
    """
    if fmt is None:
        return values
    if isinstance(fmt, str):
        fmt = number_format(fmt)
    if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values.dtype):
        return values
    text = values.astype("string")
    distinct = text.dropna().drop_duplicates()
    rewritten = {}
    for value in distinct:
        plain = _rewrite(value.strip(), fmt)
        rewritten[value] = plain if plain is not None else f"<unreadable: {value}>"
    return text.map(rewritten).astype("string")


def readable_share(values: pd.Series, fmt: NumberFormat) -> tuple[float, int]:
    """Share of the non-empty values whose number reads in ``fmt``, and how many carry its decimal mark."""
    text = values.astype("string").str.strip().dropna()
    text = text[text != ""]
    if text.empty:
        return 0.0, 0
    ok = 0
    marked = 0
    for value in text:
        found = _SPAN.fullmatch(re.sub(r"^[^\d+\-.,]+|[^\d]+$", "", value))
        if not found:
            continue
        body = found.group(0).lstrip("+-")
        if fmt.pattern.match(body):
            ok += 1
            whole, mark, frac = body.partition(fmt.decimal)
            # a mark with three digits after it and no grouping could be a thousands separator
            marked += bool(mark) and (len(frac) != 3 or any(ch in whole for ch in fmt.groups))
    return ok / len(text), marked


def detect_number_format(values: pd.Series, sample: int = 2000) -> tuple[str, float]:
    """The number format that reads most of ``values`` (distinct values sampled), and its share.

    Ties go to the format whose decimal mark the values actually use, then to the default; so
    '27,23' and '2.109,19' point to '1.234,56' while '1,234' alone stays the default.

    Example:
        >>> detect_number_format(pd.Series(["27,23", "2.109,19", "5"]))
        ('1.234,56', 1.0)
        >>> detect_number_format(pd.Series(["1 234,50", "12,5"]))
        ('1 234,56', 1.0)
        >>> detect_number_format(pd.Series(["1,234", "12"]))
        ('1,234.56', 1.0)
    """
    distinct = values.astype("string").str.strip().dropna().drop_duplicates().head(sample)
    best: tuple[float, int, int, str] | None = None
    for rank, name in enumerate(FORMAT_NAMES):
        share, marked = readable_share(distinct, _FORMATS[name])
        key = (share, marked, -rank, name)
        if best is None or key > best:
            best = key
    assert best is not None
    return best[3], best[0]
