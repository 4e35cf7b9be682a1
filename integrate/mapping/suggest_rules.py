"""Rules ``suggest`` applies beyond header and value likeness: code sets, pricing dates, safety vetoes.

- Code columns (M/F, 1/2, Male/Female, Herr/Frau ...) get a drafted value map onto one canonical
  code set (F, M, X; ISO/IEC 5218 numbers 1 = male, 2 = female, 0 and 9 = not known / not
  applicable);
- a date column beside an amount in another currency is proposed as its pricing date;
- vetoes that keep a draft from being dangerous: a low-cardinality code column never feeds a name
  field, and a column whose header names a unit or a body measure never feeds a money field.
"""

from __future__ import annotations

import unicodedata

from .meanings import header_currency, header_unit
from .profile import ColumnProfile
from .spec import CanonicalField
from .suggest_words import normalise_header

# Gender and salutation spellings in exports, to F / M / X (common practice; the numbers are ISO/IEC 5218).
_GENDER: dict[str, str | None] = {
    **dict.fromkeys(["m", "male", "man", "mann", "mannlich", "herr", "hr", "mr", "masculin", "homme", "h",
                     "hombre", "masculino", "heer", "dhr", "1"], "M"),
    **dict.fromkeys(["f", "female", "woman", "frau", "fr", "weiblich", "w", "mrs", "ms", "miss", "femme",
                     "feminin", "mme", "mujer", "femenino", "mevr", "vrouw", "2"], "F"),
    **dict.fromkeys(["x", "d", "divers", "diverse", "other", "non binary", "nonbinary", "mx"], "X"),
    **dict.fromkeys(["u", "unknown", "unbekannt", "0", "9", "n/a", "na", "?", "-"], None),
}
_GENDER_HEADERS = frozenset({"gender", "sex", "geschlecht", "anrede", "salutation", "title", "sexe", "genre",
                             "sexo", "geslacht", "aanhef", "civilite"})
_BODY_WORDS = frozenset({"height", "weight", "ht", "wt", "stature", "mass", "grosse", "gewicht", "taille", "poids",
                         "lengte", "altura", "peso", "korpergrosse", "bmi"})


def _fold(text: str) -> str:
    decomposed = unicodedata.normalize("NFKD", text.strip().lower().rstrip("."))
    return "".join(ch for ch in decomposed if not unicodedata.combining(ch))


def code_values(profile: ColumnProfile, values: list[str]) -> dict[str, str | None] | None:
    """A value map onto F / M / X when every distinct value is a gender or salutation code, else None.

    Example:
        >>> code_values(None, ["Herr", "Frau", "Divers"])
        {'Herr': 'M', 'Frau': 'F', 'Divers': 'X'}
        >>> code_values(None, ["1", "2"]), code_values(None, ["S", "M", "L"])
        ({'1': 'M', '2': 'F'}, None)
    """
    if not values or len(values) > 12:
        return None
    mapped = {}
    for value in values:
        key = _fold(value)
        if key not in _GENDER:
            return None
        mapped[value] = _GENDER[key]
    codes = {v for v in mapped.values() if v}
    return mapped if {"M", "F"} <= codes or (codes and not values[0].isdigit()) else None


def is_gender_header(name: str) -> bool:
    return bool(set(normalise_header(name).split()) & _GENDER_HEADERS)


def is_code_column(profile: ColumnProfile) -> bool:
    """Few distinct short values: a code (gender, size, status), not a name."""
    present = profile.count - profile.empty
    short = all(len(e) <= 3 for e in profile.examples)
    few = profile.distinct <= 12 and (present >= 4 * profile.distinct or short)
    return few and (short or profile.distinct <= 3)


def money_vetoed(profile: ColumnProfile) -> bool:
    """A header naming a unit or a body measure: never money."""
    words = set(normalise_header(profile.name).split()) | set(_fold(profile.name).replace("(", " ").split())
    return header_unit(profile.name) is not None or bool(words & _BODY_WORDS)


def vetoed(profile: ColumnProfile, spec: CanonicalField) -> bool:
    """The mappings a draft must never make."""
    if spec.type == "person_name" and is_code_column(profile):
        return True
    if spec.type == "money" and money_vetoed(profile):
        return True
    if spec.type == "quantity" and (profile.symbols or header_currency(profile.name)):
        return True  # a currency in the values or the header: money, not a measure
    return False


def pricing_date(profiles: list[ColumnProfile], amount: ColumnProfile, taken: set[str]) -> str | None:
    """The nearest date column within two places of the amount column (not already mapped)."""
    names = [p.name for p in profiles]
    at = names.index(amount.name)
    for step in (1, -1, 2, -2):
        j = at + step
        if 0 <= j < len(profiles):
            p = profiles[j]
            if p.name not in taken and p.best_date_format()[1] >= 0.8 and p.best_date_format()[0] != "year":
                return p.name
    return None
