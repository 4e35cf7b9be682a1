"""Normalisers for single text values, each applied once per distinct value by ``map_distinct``."""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Callable
from functools import lru_cache
from importlib import resources

import numpy as np
import pandas as pd

_PUNCT = re.compile(r"[^\w\s-]", re.UNICODE)
_SPACES = re.compile(r"\s+")

# Honorifics and suffixes that are not part of a name (common practice in English-language registers).
HONORIFICS = frozenset({"mr", "mrs", "ms", "miss", "mx", "dr", "prof", "sir", "dame", "rev", "fr"})
SUFFIXES = frozenset({"jr", "sr", "ii", "iii", "iv", "phd", "md", "esq"})


def map_distinct(values: pd.Series, func: Callable[[str], object], dtype: str = "string") -> pd.Series:
    """Apply ``func`` once per distinct non-missing value and broadcast the result."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    mapped = [func(str(u)) for u in np.asarray(uniques, dtype=object).tolist()]
    result = pd.Series(pd.array(mapped + [None], dtype=dtype)).take(codes).reset_index(drop=True)
    result.index = values.index
    return result


# Latin letters that Unicode does not decompose into a base letter and a mark, with their usual
# ASCII spellings (common practice in Latin-to-ASCII transliteration, from memory).
_UNDECOMPOSED = str.maketrans({"ł": "l", "Ł": "L", "ø": "o", "Ø": "O", "đ": "d", "Đ": "D", "ð": "d",
                               "Ð": "D", "ħ": "h", "Ħ": "H", "ı": "i", "ŀ": "l", "Ŀ": "L", "ß": "ss",
                               "æ": "ae", "Æ": "AE", "œ": "oe", "Œ": "OE", "þ": "th", "Þ": "TH"})


def fold_accents(text: str) -> str:
    """'Zoë Ní Bhriain' -> 'Zoe Ni Bhriain', 'Łukasik' -> 'Lukasik' (Unicode NFKD, combining marks
    dropped, letters without a decomposition transliterated)."""
    if text.isascii():  # NFKD leaves ASCII as it is
        return text
    decomposed = unicodedata.normalize("NFKD", text.translate(_UNDECOMPOSED))
    return "".join(ch for ch in decomposed if not unicodedata.combining(ch))


def clean_text(text: str) -> str | None:
    """Accent-folded, lower-case, punctuation removed, spaces collapsed; '' becomes None."""
    out = _SPACES.sub(" ", _PUNCT.sub(" ", fold_accents(text).lower())).strip()
    return out or None


def name_affixes(text: str) -> str | None:
    """The honorifics and suffixes a name carries ('Dr Anna Lee Jr' -> 'dr jr'), or None."""
    cleaned = clean_text(text.replace("-", " ").replace("'", "").replace("’", ""))
    if not cleaned:
        return None
    found = [t for t in cleaned.split(" ") if t in HONORIFICS or t in SUFFIXES]
    return " ".join(found) or None


def clean_name(text: str) -> str | None:
    """A person-name part without honorifics and suffixes; hyphens become spaces."""
    cleaned = clean_text(text.replace("-", " ").replace("'", "").replace("’", ""))
    if not cleaned:
        return None
    tokens = [t for t in cleaned.split(" ") if t not in HONORIFICS and t not in SUFFIXES]
    return " ".join(tokens) or None


@lru_cache(maxsize=1)
def given_name_forms() -> dict[str, tuple[str, ...]]:
    """Name -> the formal given names it can stand for, from the packaged table (common practice).

    A formal name stands for itself; a short form shared by several formal names ('kate':
    Catherine and Katherine) stands for each of them, in table order.
    """
    text = resources.files("integrate.data").joinpath("given_names.csv").read_text(encoding="utf-8")
    forms: dict[str, list[str]] = {}
    lines = [ln for ln in text.splitlines() if ln and not ln.startswith("#")]
    for line in lines[1:]:
        formal, shorts = line.split(",", 1)
        forms.setdefault(formal, [formal])
        for short in shorts.split("|"):
            if formal not in forms.setdefault(short, []):
                forms[short].append(formal)
    return {name: tuple(formals) for name, formals in forms.items()}


def name_root(cleaned: str, which: int = 0) -> str:
    """A formal form of a cleaned given name's first word ('bob smith' -> 'robert'); ``which``
    picks among several ('kate' -> 'catherine' (0) or 'katherine' (1)), the last repeating."""
    first = cleaned.split(" ", 1)[0]
    formals = given_name_forms().get(first, (first,))
    return formals[min(which, len(formals) - 1)]


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
