"""Standardise canonical values for matching: names, emails, phones (E.164), postcodes, dates.

Every normaliser runs once per distinct value (``map_distinct``), never once per row.
"""

from __future__ import annotations

import re

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from .columns import RECORD_DATE, SOURCE
from .mapping.spec import CanonicalSchema
from .phone_numbers import CallingCode
from .phone_numbers import to_e164 as phone_e164
from .text_normalise import (
    clean_email,
    clean_identifier,
    clean_name,
    clean_postcode,
    clean_text,
    map_distinct,
    name_affixes,
    name_root,
)

ROOT_SUFFIX = "__root"  # formal given name behind a nickname
AFFIXES = "__affixes"  # honorifics and suffixes taken out of a name ('dr', 'jr')
OTHER_ROOT = "__root2"  # a second formal name for a short form shared by two ('kate')
FIRST_WORD = "__first"  # first word of a name ('anna' of 'anna marie')
YEAR, MONTH, DAY = "__y", "__m", "__d"
RECORD_DAY = "__record_day"  # the record's date as days since 1970-01-01 (NaN where unknown)


# An address as RFC 5321 / 5322 write it in practice: a dot-atom local part (letters, digits and
# ! # $ % & ' * + / = ? ^ _ ` { | } ~ -, dots only between them), '@', and a domain of at least two
# labels (letters, digits, inner hyphens, at most 63 characters each) ending in a top-level label
# of letters or an IDNA 'xn--' label. Non-ASCII letters are allowed as RFC 6531 does. Quoted local
# parts and address literals ("a b"@x, a@[192.0.2.1]) are legal but not accepted: exports of
# people's contact details do not hold them. Total length at most 254 (RFC 3696 errata 1690).
_ATOM = r"[A-Za-z0-9!#$%&'*+/=?^_`{|}~\u00a0-\U0010ffff-]+"
_LABEL = r"[A-Za-z0-9\u00a0-\U0010ffff](?:[A-Za-z0-9\u00a0-\U0010ffff-]{0,61}[A-Za-z0-9\u00a0-\U0010ffff])?"
_EMAIL = re.compile(
    rf"{_ATOM}(?:\.{_ATOM})*@(?:{_LABEL}\.)+(?:[A-Za-z\u00a0-\U0010ffff]{{2,63}}|xn--[A-Za-z0-9-]{{1,59}})")
_EMAIL_SPACE = re.compile(r"[\s\x00-\x1f\x7f]")


def is_email(text: str) -> bool:
    """Whether ``text`` (already stripped) is an e-mail address.

    Example:
        >>> [is_email(t) for t in ("ana.lee@post.example.org", "=1+2", "<script>x</script>", "a@b", "a..b@x.org")]
        [True, False, False, False, False]
    """
    return len(text) <= 254 and not _EMAIL_SPACE.search(text) and _EMAIL.fullmatch(text) is not None


def check_emails(values: pd.Series) -> tuple[pd.Series, pd.DataFrame]:
    """E-mail values with non-addresses left empty, and a failures frame for them (once per distinct value).

    Returns:
        The stripped values (``<NA>`` where not an address) and failures with ``index, value, reason,
        message`` (reason ``bad_email``), as the mapping stage's converters return them.
    """
    text = values.astype("string").str.strip().replace("", pd.NA)
    valid = map_distinct(text, is_email, dtype="boolean").fillna(True).to_numpy(dtype=bool)
    bad = text[~valid]
    failures = pd.DataFrame({
        "index": bad.index,
        "value": bad.to_numpy(dtype=object),
        "reason": "bad_email",
        "message": [f"{str(v)[:60]!r} is not an e-mail address" for v in bad.to_numpy(dtype=object)],
    })
    return text.mask(pd.Series(~valid, index=text.index)).astype("string"), failures


def to_e164(text: str, region: str | None, custom: dict[str, CallingCode] | None = None) -> str | None:
    """A phone number in E.164 form ('+447700900123'), or its digits when it cannot be parsed.

    ``region`` is ISO 3166 alpha-2 or a calling code ('+44'); ``custom`` holds calling codes the
    workspace declares (see ``integrate.phone_numbers``).

    Example:
        >>> to_e164("07700 900123", "GB")
        '+447700900123'
        >>> to_e164("0044 20 7946 0123", "GB")
        '+442079460123'
    """
    return phone_e164(text, region, custom)


def standardise_phones(values: pd.Series, regions: pd.Series,
                       custom: dict[str, CallingCode] | None = None) -> pd.Series:
    """E.164 per distinct (value, region) pair."""
    keys = values.astype("string") + "\x1f" + regions.fillna("").astype("string")

    def one(key: str) -> str | None:
        text, region = key.split("\x1f", 1)
        return to_e164(text, region or None, custom)

    out = map_distinct(keys, one)
    return out.where(values.notna(), pd.NA)


def date_parts(text: pd.Series) -> list[pd.array]:
    """Year, month and day of ISO 8601 dates ('1987-03-04'; a year alone gives the year only).

    Example:
        >>> [part.tolist() for part in date_parts(pd.Series(["1987-03-04", "1987", None]))]
        [[1987, 1987, <NA>], [3, <NA>, <NA>], [4, <NA>, <NA>]]
    """
    # one regular expression over the whole column in Arrow, not one Python call per row
    arrow = pa.array(text.astype("string").to_numpy(dtype=object, na_value=None), type=pa.string())
    found = pc.extract_regex(arrow, r"^(?P<y>[0-9]{4})(?:-(?P<m>[0-9]{2})-(?P<d>[0-9]{2}))?")
    parts = []
    for group in ("y", "m", "d"):
        digits = pc.struct_field(found, group)
        digits = pc.if_else(pc.equal(digits, ""), pa.scalar(None, pa.string()), digits)
        parts.append(pd.array(pc.cast(digits, pa.int16()).to_numpy(zero_copy_only=False), dtype="Int16"))
    return parts


def standardise(records: pd.DataFrame, canonical: CanonicalSchema,
                regions: dict[str, str | None] | None = None) -> pd.DataFrame:
    """Canonical records -> a frame of comparison-ready columns (same index).

    Args:
        records: canonical frame (meta columns + canonical fields).
        canonical: the schema; only compared fields are prepared.
        regions: default phone region per source name.

    Returns:
        One column per compared field holding its standard form, plus helper columns:
        ``<field>__affixes`` for person names (honorifics and suffixes taken out, e.g. 'dr jr'),
        ``<field>__root`` for person names (formal given name behind a nickname) and
        ``<field>__y/__m/__d`` for dates; ``__record_day``, the record's date in days (contact
        details that differ mean less between records years apart: people move).
    """
    out = pd.DataFrame(index=records.index)
    if RECORD_DATE in records:
        days = pd.to_datetime(records[RECORD_DATE].astype("string"), errors="coerce", format="ISO8601")
        out[RECORD_DAY] = ((days - pd.Timestamp("1970-01-01")).dt.days).astype("float64")
    for name, spec in canonical.fields.items():
        if not spec.is_compared():
            continue
        values = records[name]
        if spec.type == "person_name":
            cleaned = map_distinct(values, clean_name)
            out[name] = cleaned
            out[name + AFFIXES] = map_distinct(values, name_affixes)
            out[name + ROOT_SUFFIX] = map_distinct(cleaned, name_root)
            out[name + OTHER_ROOT] = map_distinct(cleaned, lambda v: name_root(v, 1))
            out[name + FIRST_WORD] = map_distinct(cleaned, lambda v: v.split(" ", 1)[0])
        elif spec.type == "email":
            out[name] = map_distinct(values, clean_email)
        elif spec.type == "phone":
            source_regions = records[SOURCE].map(regions or {}).astype("string")
            if spec.region:
                source_regions = source_regions.fillna(spec.region)
            out[name] = standardise_phones(values, source_regions, canonical.calling_code_plans())
        elif spec.type == "postcode":
            out[name] = map_distinct(values, clean_postcode)
        elif spec.type == "identifier":
            out[name] = map_distinct(values, clean_identifier)
        elif spec.type == "date":
            text = values.astype("string")
            out[name] = text
            for suffix, part in zip((YEAR, MONTH, DAY), date_parts(text)):
                out[name + suffix] = pd.Series(part, index=records.index)
        elif spec.type in ("quantity", "money"):
            out[name] = pd.to_numeric(values, errors="coerce").astype("float64")
        else:  # text, category
            out[name] = map_distinct(values, clean_text)
    return out
