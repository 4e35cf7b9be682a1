"""Meanings: which columns of which sources feed each canonical field, and what each one means.

The table answers "where does this merged value come from, and did every source mean the
same thing by it?". ``meaning_findings`` adds the cheap checks that need no data: a column
whose name says one unit or currency while its mapping declares another, a field nothing
feeds, and a field fed by two columns of one source.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence

import pandas as pd

from ..errors import ConversionError
from .factors import unit_label
from .findings import Finding
from .spec import CanonicalSchema, SourceMapping
from .units import resolve_unit

MEANING_COLUMNS = ["field", "type", "meaning", "source", "column", "how", "note"]

# Header words that name a unit (common spellings in exports); one-letter ones are too ambiguous.
_UNIT_WORDS = frozenset({"in", "inch", "inches", "cm", "mm", "ft", "feet", "kg", "kgs", "kilos", "lb", "lbs",
                         "pounds", "st", "stone", "oz", "metres", "meters", "grams"})
# Currency marks in headers: symbols, and the codes exports commonly spell out (ISO 4217).
_CURRENCY_MARKS = {"€": "EUR", "£": "GBP", "¥": "JPY", "eur": "EUR", "euro": "EUR", "euros": "EUR",
                   "gbp": "GBP", "usd": "USD", "jpy": "JPY", "chf": "CHF", "sek": "SEK", "nok": "NOK",
                   "dkk": "DKK", "cad": "CAD", "aud": "AUD"}

Locate = Callable[[str, str], tuple[str | None, int | None, int | None]]


def _how(entry_text: str | None, **parts: str | None) -> str:
    shown = [f"{k} {v}" for k, v in parts.items() if v]
    return ", ".join(([entry_text] if entry_text else []) + shown)


def field_meanings(canonical: CanonicalSchema, mappings: Sequence[SourceMapping]) -> pd.DataFrame:
    """One row per (canonical field, feeding column): field, type, meaning, source, column, how, note.

    A field no column feeds gets one row with empty source and column.

    Example:
        >>> schema = CanonicalSchema(fields={"height_cm": {"type": "quantity", "unit": "cm",
        ...     "meaning": "Standing height in centimetres."}})
        >>> shop = SourceMapping(source="shop", read={"format": "csv", "path": "s.csv"}, record_id="id",
        ...     as_of="2026-01-31", columns={"ht": {"field": "height_cm", "unit": "in", "note": "Self-reported."}})
        >>> field_meanings(schema, [shop])[["field", "source", "column", "how", "note"]].values.tolist()
        [['height_cm', 'shop', 'ht', 'unit in', 'Self-reported.']]
    """
    rows: list[dict[str, str]] = []
    for name, spec in canonical.fields.items():
        fed = False
        for mapping in mappings:
            for column, entry in mapping.column_maps().items():
                if name not in entry.targets():
                    continue
                fed = True
                how = _how("split" if entry.split else None, unit=entry.unit, unit_column=entry.unit_column,
                           currency=entry.currency, currency_column=entry.currency_column,
                           format=entry.format, priced_on=entry.priced_on)
                rows.append({"field": name, "type": spec.type, "meaning": spec.meaning, "source": mapping.source,
                             "column": column, "how": how, "note": entry.note or ""})
        if not fed:
            rows.append({"field": name, "type": spec.type, "meaning": spec.meaning, "source": "", "column": "",
                         "how": "", "note": ""})
    return pd.DataFrame(rows, columns=MEANING_COLUMNS)


def header_unit(column: str) -> str | None:
    """The unit a column's name states ('Height (in)' -> 'inch'), or None.

    Example:
        >>> header_unit("Height (in)"), header_unit("weight_lbs"), header_unit("Annual Fee")
        ('inch', 'pound', None)
    """
    words = [w for w in re.split(r"[^a-z]+", column.lower()) if w in _UNIT_WORDS]
    if '"' in column:
        words.append("in")
    found = {resolve_unit(w) for w in words}
    return found.pop() if len(found) == 1 else None


def header_currency(column: str) -> str | None:
    """The ISO 4217 code a column's name states ('Course fee €' -> 'EUR'), or None.

    Example:
        >>> header_currency("Course fee €"), header_currency("spend_gbp"), header_currency("fee")
        ('EUR', 'GBP', None)
    """
    marks = [m for m in re.findall(r"[€£¥]|[a-z]+", column.lower()) if m in _CURRENCY_MARKS]
    found = {_CURRENCY_MARKS[m] for m in marks}
    return found.pop() if len(found) == 1 else None


def meaning_findings(canonical: CanonicalSchema, mappings: Sequence[SourceMapping], locate: Locate) -> list[Finding]:
    """Names that contradict the declared unit or currency, fields nothing feeds, fields fed twice."""
    findings: list[Finding] = []
    for mapping in mappings:
        fed_by: dict[str, list[str]] = {}
        for column, entry in mapping.column_maps().items():
            for target in entry.targets():
                fed_by.setdefault(target, []).append(column)
            spec = canonical.fields.get(entry.field or "")
            if spec is None:
                continue
            file, line, col = locate(mapping.source, column)
            if spec.type == "quantity" and entry.unit:
                said = header_unit(column)
                try:
                    declared = resolve_unit(entry.unit)
                except ConversionError:
                    continue  # reported as an error by the mapping step
                if said and said != declared:
                    findings.append(Finding(
                        "warning", "name_contradicts_unit",
                        f"column '{column}' is named in {unit_label(said)} but its mapping declares "
                        f"unit '{entry.unit}'",
                        file, line, col, mapping.source, hint="check which unit the export really uses"))
            if spec.type == "money" and entry.currency:
                said = header_currency(column)
                if said and said != entry.currency.strip().upper():
                    findings.append(Finding(
                        "warning", "name_contradicts_currency",
                        f"column '{column}' is named in {said} but its mapping declares currency '{entry.currency}'",
                        file, line, col, mapping.source, hint="check which currency the export really uses"))
        for target, columns in fed_by.items():
            if len(columns) > 1:
                file, line, col = locate(mapping.source, columns[1])
                findings.append(Finding(
                    "note", "field_fed_twice",
                    f"'{target}' is fed by {len(columns)} columns of '{mapping.source}' "
                    f"({', '.join(repr(c) for c in columns)}); the first non-empty value wins, in mapping order",
                    file, line, col, mapping.source))
    fed = {t for m in mappings for e in m.column_maps().values() for t in e.targets()}
    for name in canonical.fields:
        if name not in fed and mappings:
            file, line, col = locate("", name)  # "" = the canonical schema
            findings.append(Finding(
                "warning", "field_not_fed", f"no source column feeds canonical field '{name}'",
                file, line, col, None, hint="map a column to it, or remove the field from canonical.yaml"))
    return findings
