"""Rules ``suggest`` applies beyond header and value likeness: code sets, pricing dates, safety vetoes.

- Code columns (M/F, 1/2, Male/Female, Herr/Frau ...) get a drafted value map onto one canonical
  code set (F, M, X; ISO/IEC 5218 numbers 1 = male, 2 = female, 0 and 9 = not known / not
  applicable);
- a date column beside an amount in another currency is proposed as its pricing date;
- a whole-address cell gets the layout in words that reads most of its values;
- the full-date column that dates each record is proposed as the source's ``record_date``;
- vetoes that keep a draft from being dangerous: a low-cardinality code column never feeds a name
  field, and a column whose header names a unit or a body measure never feeds a money field.
"""

from __future__ import annotations

import unicodedata

import pandas as pd

from .addresses import layout_pattern
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


# Layouts of a whole address in one cell, most parts first (addresses.layout_pattern reads them).
ADDRESS_LAYOUTS = ("street, town, postcode", "street, postcode town", "street, town postcode", "street, postcode")


def address_layout(samples: list[str], parts: set[str]) -> tuple[str, float]:
    """The layout reading most of ``samples`` (ties: the one with more parts) and the share it
    reads; ``auto`` when none reads four in five. Only layouts whose parts are all in ``parts``
    (the canonical fields there are to fill) are tried.

    Example:
        >>> address_layout(["4 Mill Lane, TC1 4AB", "12, Fen Row, TK2 9ZZ"], {"street", "town", "postcode"})
        ('street, postcode', 1.0)
    """
    best, best_share = "auto", 0.0
    for layout in ADDRESS_LAYOUTS:
        words = {w.strip() for w in layout.replace(",", " ").split()}
        if not words <= parts or not samples:
            continue
        pattern = layout_pattern(layout)
        share = sum(1 for v in samples if pattern.match(v.strip())) / len(samples)
        if share > best_share:
            best, best_share = layout, share
    return (best, best_share) if best_share >= 0.8 else ("auto", best_share)


# Header words of a column that dates the record itself, the last change first (common practice).
_CHANGED_WORDS = ("updated", "modified", "changed", "last", "latest", "geandert", "aktualisiert", "modifie")
_DATED_WORDS = ("order", "joined", "join", "registered", "created", "signup", "signed", "rented", "event",
                "visit", "since", "date", "datum", "fecha")


def record_date_column(profiles: list[ColumnProfile], birth_columns: set[str], record_id: str) -> str | None:
    """The full-date column that dates each record (``record_date``), or None.

    Candidates are the columns whose values read as full dates (not years alone), other than the
    record ID and the columns feeding a birth date. One candidate is taken as it is; among several,
    a header naming a last change wins, then one naming an event of the record (joined, order,
    signed up...), then the column whose values are the latest.
    """
    from .dates import parse_dates

    candidates = []
    for p in profiles:
        fmt, share, _ = p.best_date_format()
        if p.name == record_id or p.name in birth_columns or not fmt or fmt == "year" or share < 0.9:
            continue
        words = set(normalise_header(p.name).split())
        rank = 0 if words & set(_CHANGED_WORDS) else 1 if words & set(_DATED_WORDS) else 2
        days = parse_dates(pd.Series(p.samples, dtype="string"), None if fmt == "iso" else fmt)[0]  # ISO text
        candidates.append((rank, str(days.dropna().max()) if days.notna().any() else "", p.name))
    # lowest rank first; among equal ranks the latest dates (ISO text sorts as dates do), then header order
    ranked = sorted(candidates, key=lambda c: c[1], reverse=True)
    return min(ranked, key=lambda c: c[0])[2] if ranked else None


CODES_COVER = 0.95  # share of the non-empty rows a value map must cover to speak for a code field alone
# Header words of money columns, after normalise_header (common wording in English, German, French,
# Spanish, Dutch and Italian exports); a word ending in one of the stems counts too (Jahresbeitrag).
_MONEY_WORDS = frozenset({
    "spend", "spent", "spending", "paid", "payment", "payments", "price", "prices", "cost", "costs", "fee", "fees",
    "amount", "amounts", "charge", "charges", "charged", "revenue", "sales", "turnover", "deposit", "deposits",
    "dues", "subscription", "kosten", "umsatz", "kaution", "montant", "paiement", "prix", "cout", "couts",
    "cotisation", "frais", "tarif", "depense", "depenses", "importe", "pago", "pagos", "precio", "coste", "costo",
    "cuota", "gasto", "gastos", "tarifa", "deposito", "betaling", "contributie", "borg", "importo", "prezzo"})
_MONEY_STEMS = ("betrag", "beitrag", "zahlung", "gebuhr", "preis", "bedrag", "bijdrage", "prijs")
# Words naming a sum of anything (visits, points): money only when cents or a currency symbol show it.
_WEAK_MONEY_WORDS = frozenset({"total", "totals", "balance", "sum", "summe", "gesamt", "solde", "saldo"})
_MONEY_HEADER = 0.6  # header likeness a money word gives a money field


def money_header(profile: ColumnProfile, h: float, best_phrase: str) -> tuple[float | None, str | None]:
    """The header likeness for a money field (None: the values are no amounts), and the money word that lifts it.

    A money word in the header (spend, Beitrag, importe ...) lifts the likeness to _MONEY_HEADER when
    the values look like amounts. Without a currency named in the header or the values, amounts have
    at most two decimals; 'total' and 'balance' also count visits and points, so alone they need cents.
    """
    words = normalise_header(profile.name).split()
    strong = next((w for w in words if w in _MONEY_WORDS or w.endswith(_MONEY_STEMS)), None)
    weak = next((w for w in words if w in _WEAK_MONEY_WORDS), None)
    named = bool(profile.symbols or header_currency(profile.name))
    if not named and sum(share for places, share in profile.decimals.items() if places > 2) > 1 - CODES_COVER:
        return None, None  # three decimals and more: a measure or a rate, not an amount
    if not strong and (weak or best_phrase in _WEAK_MONEY_WORDS) and not named \
            and profile.decimals.get(2, 0.0) < 0.3:
        return None, None
    if h >= _MONEY_HEADER or not (strong or weak) or profile.share("number") < 0.9 \
            or profile.best_date_format()[1] >= 0.9:
        return h, None
    return _MONEY_HEADER + 0.1 * h, strong or weak  # the fuzzy likeness only ranks the money fields
