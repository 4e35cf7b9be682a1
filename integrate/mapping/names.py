"""Whole names in one column, in mixed layouts: ``name_format: auto``.

Reads, value by value (once per distinct value):

- "Family, Given" (and "Family, Given M."), with the family name's particles on either side
  ("van der Berg, Anna" and "Berg, Anna van der", the way Dutch registers sort);
- "Given Family" and "Given M. Family": the family name is the last word, or starts at the first
  particle after the given name ("Anna van der Berg", "Luis de la Cruz"); hyphenated family names
  are one word; middle initials are dropped from the given name;
- a single word: the family name alone.

A value with digits or other signs no name has, or an empty side of a comma, is not split: it
becomes a failure (reason ``name_not_split``) that ``check`` counts and shows, and the run's limit on
unreadable values applies to it. Titles in front ("Dr", "Mrs", "Herr") are dropped. The particle and
title lists are common practice (recalled from memory), not a standard.
"""

from __future__ import annotations

import re

import pandas as pd

PARTICLES = frozenset({"van", "von", "der", "den", "de", "da", "di", "du", "la", "le", "del", "della", "dos",
                       "das", "do", "ter", "ten", "zu", "zur", "af", "av", "bin", "ibn", "al", "el", "mac", "st"})
TITLES = frozenset({"mr", "mrs", "ms", "miss", "mx", "dr", "prof", "herr", "frau", "sir", "dame", "mme", "mlle",
                    "sr", "sra", "sig", "sigra"})
_NAME_SIGNS = re.compile(r"^[^\W\d_](?:[^\W\d_]|[ '’.\-,])*$")
_INITIAL = re.compile(r"^[^\W\d_]\.?$")


def _words(text: str) -> list[str]:
    return [w for w in re.split(r"\s+", text.strip()) if w]


def _drop_titles(words: list[str]) -> list[str]:
    while len(words) > 1 and words[0].lower().rstrip(".") in TITLES:
        words = words[1:]
    return words


def _given(words: list[str]) -> str | None:
    """Given names without middle initials ('Anna M.' -> 'Anna'; a lone initial is kept)."""
    kept = [w for i, w in enumerate(words) if i == 0 or not _INITIAL.match(w)]
    return " ".join(kept) or None


def split_name(text: str) -> tuple[str | None, str | None] | None:
    """(given, family) of one whole name; None when it cannot be split.

    Example:
        >>> split_name("van der Berg, Anna"), split_name("Anna M. van der Berg")
        (('Anna', 'van der Berg'), ('Anna', 'van der Berg'))
        >>> split_name("Berg, Anna van der"), split_name("Jean-Luc Dubois-Martin"), split_name("Okonkwo")
        (('Anna', 'van der Berg'), ('Jean-Luc', 'Dubois-Martin'), (None, 'Okonkwo'))
        >>> split_name("Dr Priya Raman"), split_name("Room 12"), split_name("Smith,")
        (('Priya', 'Raman'), None, None)
    """
    value = " ".join(text.split())
    if not value or not _NAME_SIGNS.match(value):
        return None
    if "," in value:
        parts = [p.strip() for p in value.split(",")]
        if len(parts) != 2 or not parts[0] or not parts[1]:
            return None
        family = _words(parts[0])
        given = _drop_titles(_words(parts[1]))
        trailing = len(given)
        while trailing > 1 and given[trailing - 1].lower() in PARTICLES:
            trailing -= 1
        family = given[trailing:] + family  # particles written after the given name belong in front
        return _given(given[:trailing]), " ".join(family)
    words = _drop_titles(_words(value))
    if len(words) == 1:
        return None, words[0]
    start = len(words) - 1
    for i in range(1, len(words) - 1):
        if words[i].lower() in PARTICLES:
            start = i
            break
    return _given(words[:start]), " ".join(words[start:])


def split_names(values: pd.Series) -> tuple[pd.Series, pd.Series, pd.Series]:
    """Given names, family names, and a mask of the non-empty values that could not be split."""
    text = values.astype("string").str.strip()
    distinct = text.dropna().drop_duplicates()
    read = {v: split_name(v) for v in distinct if v}
    given = text.map({v: r[0] for v, r in read.items() if r}).astype("string")
    family = text.map({v: r[1] for v, r in read.items() if r}).astype("string")
    bad = {v for v, r in read.items() if r is None}
    failed = text.isin(list(bad)).fillna(False).astype(bool) if bad else pd.Series(False, index=text.index)
    return given, family, failed
