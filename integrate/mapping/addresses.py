"""Addresses in one cell, split into street, town and postcode.

Two ways, chosen by the column's ``address_format``:

- a layout in words, such as ``"street, town, postcode"`` or ``"street, postcode town"``: the parts
  in that order, separated as written (spaces around separators are free);
- ``auto``: the postcode is recognised by its shape wherever it sits (UK, five-digit, Dutch,
  Canadian and four-digit forms; the shapes are the national formats, common practice), and the
  rest, cut at commas, gives the street (first part) and the town (last part).

A non-empty value neither way reads becomes a failure (reason ``address_not_split``).
"""

from __future__ import annotations

import re

import pandas as pd

PARTS = ("street", "town", "postcode")

# Postcode shapes, most specific first (common practice).
_POSTCODE = (
    r"[A-Z]{1,2}\d[A-Z\d]?\s*\d[A-Z]{2}",  # UK
    r"[A-Z]\d[A-Z]\s?\d[A-Z]\d",  # Canada
    r"\d{4}\s?[A-Z]{2}",  # Netherlands
    r"\d{5}(?:-\d{4})?",  # US ZIP, Germany, France, Italy, Spain
    r"\d{4}",  # Austria, Switzerland, Belgium, Denmark
)
_POSTCODE_RE = [re.compile(rf"(?<![\w-])(?:{p})(?![\w-])", re.IGNORECASE) for p in _POSTCODE]


def layout_pattern(layout: str) -> re.Pattern[str]:
    """A regular expression reading the layout ``"street, town, postcode"`` (words and separators).

    Raises:
        ValueError: a word other than street, town, postcode, or a part named twice.

    Example:
        >>> layout_pattern("street, postcode town").match("4 Mill Lane, TC1 4AB Tallow").groupdict()
        {'street': '4 Mill Lane', 'postcode': 'TC1 4AB', 'town': 'Tallow'}
    """
    tokens = re.split(r"([A-Za-z_]+)", layout.strip())
    out = ["^"]
    seen: set[str] = set()
    for i, token in enumerate(tokens):
        if i % 2 == 0:  # a separator between parts
            sep = token.strip()
            out.append(r"\s*" + re.escape(sep) + r"\s*" if sep else (r"\s+" if 0 < i < len(tokens) - 1 else ""))
            continue
        part = token.lower()
        if part not in PARTS:
            raise ValueError(f"address layout word '{token}' is not one of: {', '.join(PARTS)}")
        if part in seen:
            raise ValueError(f"address layout names '{part}' twice")
        seen.add(part)
        shape = "(?i:" + "|".join(_POSTCODE) + ")" if part == "postcode" else ".+?"
        out.append(rf"(?P<{part}>{shape})")
    out.append("$")
    return re.compile("".join(out))


def split_address(text: str, pattern: re.Pattern[str] | None = None) -> dict[str, str] | None:
    """The street, town and postcode of one address (parts not found are left out); None if unread.

    Example:
        >>> split_address("4 Mill Lane, Tallow Creek, TC1 4AB")
        {'street': '4 Mill Lane', 'town': 'Tallow Creek', 'postcode': 'TC1 4AB'}
        >>> split_address("Hauptstr. 5, 12345 Lindenau")
        {'street': 'Hauptstr. 5', 'town': 'Lindenau', 'postcode': '12345'}
    """
    value = " ".join(text.split())
    if not value:
        return None
    if pattern is not None:
        found = pattern.match(value)
        return {k: v.strip(" ,") for k, v in found.groupdict().items() if v and v.strip(" ,")} if found else None
    for shape in _POSTCODE_RE:
        hits = list(shape.finditer(value))
        if hits:
            hit = hits[-1]  # the postcode comes after the house number
            break
    else:
        return None
    rest = (value[: hit.start()] + "," + value[hit.end():]).strip()
    pieces = [p.strip() for p in rest.split(",") if p.strip()]
    if not pieces:
        return None
    out = {"street": pieces[0]}
    if len(pieces) > 1:
        out["town"] = pieces[-1]
    out["postcode"] = hit.group(0).upper()
    return {k: out[k] for k in PARTS if k in out}


def split_addresses(values: pd.Series, layout: str) -> tuple[dict[str, pd.Series], pd.Series]:
    """Each part as a column (aligned with ``values``), and a mask of non-empty values not read."""
    pattern = None if layout == "auto" else layout_pattern(layout)
    text = values.astype("string").str.strip()
    read = {v: split_address(v, pattern) for v in text.dropna().drop_duplicates() if v}
    parts = {part: text.map({v: r.get(part) for v, r in read.items() if r and part in r}).astype("string")
             for part in PARTS}
    bad = [v for v, r in read.items() if r is None]
    failed = text.isin(bad).fillna(False).astype(bool) if bad else pd.Series(False, index=text.index)
    return parts, failed
