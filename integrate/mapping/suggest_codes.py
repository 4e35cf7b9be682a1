"""Code columns for ``suggest``: which columns may feed a gender-coded field, and their value maps.

A category field whose name says gender (or sex) takes a column only when its header says so or
its values map onto the field's codes (F, M, X) across nearly all rows; a yes/no flag and a
title column never do.
"""

from __future__ import annotations

from .profile import ColumnProfile
from .suggest_rules import CODES_COVER, code_values
from .suggest_words import normalise_header

GENDER_HEADER_AT = 0.7  # header likeness from which a column is taken to say it holds the gender
# Yes/no answers as exports write them: a flag, never a code describing a person.
_FLAG_VALUES = frozenset({"y", "n", "yes", "no", "true", "false", "j", "ja", "nein", "oui", "non", "si", "sí",
                          "nee", "x"})
# Honorifics found in title columns and not in gender ones, and header words of a title column.
_TITLE_VALUES = frozenset({"dr", "prof", "rev", "revd", "capt", "cllr", "sir", "dame", "lord", "lady"})
_TITLE_HEADERS = frozenset({"title", "titel", "titre", "titulo", "honorific", "prefix"})
# Words of a canonical field name that give it the gender code set (F, M, X) that value maps draft onto.
_GENDER_FIELD_WORDS = frozenset({"gender", "sex", "geschlecht", "sexe", "genre", "sexo", "geslacht"})


def code_map(profile: ColumnProfile) -> tuple[dict[str, str | None], float, list[str]] | None:
    """A value map onto F / M / X of the codes holding nearly all rows, its cover, and the rarest others.

    The others (mapped to null) are left out one by one, rarest first, while they hold at most
    1 - CODES_COVER of the rows.
    """
    codes, present = list(profile.code_counts), sum(profile.code_counts.values())
    dropped = 0
    for keep in range(len(codes), 0, -1):
        if dropped > (1 - CODES_COVER) * present:
            break
        mapped = code_values(profile, codes[:keep])
        if mapped is not None:
            return {**mapped, **dict.fromkeys(codes[keep:])}, 1 - dropped / present, codes[keep:]
        dropped += profile.code_counts[codes[keep - 1]]
    return None


def is_title_column(profile: ColumnProfile) -> bool:
    """A few short codes headed 'title', or holding an honorific no gender column holds (Dr, Prof)."""
    said = set(normalise_header(profile.name).split()) & _TITLE_HEADERS
    short = bool(profile.codes) and all(len(_fold_code(c)) <= 5 for c in profile.codes)
    return short and (bool(said) or any(_fold_code(c) in _TITLE_VALUES for c in profile.codes))


def _fold_code(value: str) -> str:
    return value.strip().lower().rstrip(".")


def is_gender_field(name: str) -> bool:
    return bool(set(normalise_header(name).split()) & _GENDER_FIELD_WORDS)


def gender_gate(profile: ColumnProfile, h: float) -> tuple[float | None, str | None]:
    """Whether a column may feed a gender-coded field: (confidence floor, None) if so, (None, why not) if not.

    Header or values must say it: a header like the field's, or values that a value map turns into
    at least two of F / M / X across nearly all rows (number codes such as 1 / 2 only with such a header).
    """
    folded = {_fold_code(c) for c in profile.codes}
    if profile.codes and folded <= _FLAG_VALUES:
        return None, "its values are a yes/no flag, not a gender"
    if is_title_column(profile):
        return None, ("a title is not a gender record; it could be value-mapped onto gender (F, M, X; titles "
                      "such as Dr to null) if you want")
    if h >= GENDER_HEADER_AT:
        return 0.0, None
    found = code_map(profile)
    if found is not None and not any(c.isdigit() for c in found[0]) and \
            len({v for v in found[0].values() if v}) >= 2:
        return 0.6 * found[1], None  # such values speak for themselves
    return None, "neither its header nor its values say gender (no value map covers them)"
