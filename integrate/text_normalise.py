"""Normalisers for single text values, each applied once per distinct value by ``map_distinct``."""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Callable
from functools import lru_cache
from importlib import resources

import pandas as pd

_PUNCT = re.compile(r"[^\w\s-]", re.UNICODE)
_SPACES = re.compile(r"\s+")

# Honorifics and suffixes that are not part of a name (common practice in English-language registers).
HONORIFICS = frozenset({"mr", "mrs", "ms", "miss", "mx", "dr", "prof", "sir", "dame", "rev", "fr"})
SUFFIXES = frozenset({"jr", "sr", "ii", "iii", "iv", "phd", "md", "esq"})


def map_distinct(values: pd.Series, func: Callable[[str], object], dtype: str = "string") -> pd.Series:
    """Apply ``func`` once per distinct non-missing value and broadcast the result."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    mapped = [func(str(u)) for u in uniques]
    result = pd.Series(pd.array(mapped + [None], dtype=dtype)).take(codes).reset_index(drop=True)
    result.index = values.index
    return result


def fold_accents(text: str) -> str:
    """'Zoë Ní Bhriain' -> 'Zoe Ni Bhriain' (Unicode NFKD, combining marks dropped)."""
    decomposed = unicodedata.normalize("NFKD", text)
    return "".join(ch for ch in decomposed if not unicodedata.combining(ch)).replace("ß", "ss")


def clean_text(text: str) -> str | None:
    """Accent-folded, lower-case, punctuation removed, spaces collapsed; '' becomes None."""
    out = _SPACES.sub(" ", _PUNCT.sub(" ", fold_accents(text).lower())).strip()
    return out or None


def clean_name(text: str) -> str | None:
    """A person-name part without honorifics and suffixes; hyphens become spaces."""
    cleaned = clean_text(text.replace("-", " ").replace("'", "").replace("’", ""))
    if not cleaned:
        return None
    tokens = [t for t in cleaned.split(" ") if t not in HONORIFICS and t not in SUFFIXES]
    return " ".join(tokens) or None


@lru_cache(maxsize=1)
def given_name_roots() -> dict[str, str]:
    """Short form -> formal given name, from the packaged equivalents table (common practice)."""
    text = resources.files("integrate.data").joinpath("given_names.csv").read_text(encoding="utf-8")
    roots: dict[str, str] = {}
    lines = [ln for ln in text.splitlines() if ln and not ln.startswith("#")]
    for line in lines[1:]:
        formal, shorts = line.split(",", 1)
        roots.setdefault(formal, formal)
        for short in shorts.split("|"):
            # a short form shared by two formal names (e.g. 'alex') keeps its first formal name
            roots.setdefault(short, formal)
    return roots


def name_root(cleaned: str) -> str:
    """The formal form of a cleaned given name's first word ('bob smith' -> 'robert')."""
    first = cleaned.split(" ", 1)[0]
    return given_name_roots().get(first, first)


def digits_only(text: str) -> str | None:
    out = re.sub(r"\D", "", text)
    return out or None


def clean_postcode(text: str) -> str | None:
    out = re.sub(r"[^0-9A-Za-z]", "", fold_accents(text)).upper()
    return out or None


def clean_email(text: str) -> str | None:
    out = text.strip().lower()
    return out if "@" in out else (out or None)


def clean_identifier(text: str) -> str | None:
    out = re.sub(r"[\s\-./]", "", text).upper()
    return out or None
