"""Matching for DataFrames in a notebook, without mapping files: ``deduplicate`` and ``link``."""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cached_property

import pandas as pd

from .columns import RECORD_DATE, RECORD_ID, ROW, SOURCE, TRUST
from .errors import ConversionError
from .ids import canonical_order
from .mapping.dates import parse_dates
from .mapping.spec import CanonicalSchema, FieldType, Thresholds
from .matching import MatchResult, match_records
from .resolve import resolve
from .text_normalise import map_distinct

# Column-name hints for inferring field types (common practice in exports).
_NAME_HINTS: list[tuple[str, FieldType]] = [
    (r"e-?mail", "email"),
    (r"phone|mobile|tel", "phone"),
    (r"post_?code|zip", "postcode"),
    (r"birth|dob|date", "date"),
    (r"given|first_?name|forename|surname|last_?name|family|^name$", "person_name"),
    (r"ssn|soc_sec|_id$|^id_|number$", "identifier"),
    (r"state|country|sex|gender", "category"),
]


@dataclass
class FrameResult:
    """What ``deduplicate`` and ``link`` return; ``merged`` is resolved when first asked for."""

    crosswalk: pd.DataFrame  # source, record_id, entity_id
    pairs: pd.DataFrame
    match: MatchResult
    records: pd.DataFrame
    schema: CanonicalSchema

    @cached_property
    def merged(self) -> pd.DataFrame:
        """One row per entity, each field chosen by its resolution rule (default: most common)."""
        merged, _ = resolve(self.records, self.match.entities["entity_id"], self.schema, self.match.prepared)
        return merged


# Value patterns for inferring field types when the column name says nothing (common practice).
_VALUE_HINTS: list[tuple[str, FieldType]] = [
    (r"^[^@\s]+@[^@\s]+\.[^@\s]+$", "email"),
    (r"^\d{4}-\d{2}-\d{2}$|^\d{1,2}[/.]\d{1,2}[/.]\d{4}$|^(19|20)\d{6}$", "date"),
    (r"^\+?[\d\s().-]{7,20}$", "phone"),
]


def _type_from_values(values: pd.Series) -> FieldType | None:
    sample = values.dropna().astype(str).str.strip()
    sample = sample[sample != ""].head(1000)
    if sample.empty:
        return None
    for pattern, candidate in _VALUE_HINTS:
        if sample.str.match(pattern).mean() >= 0.9:
            return candidate
    return None


def infer_fields(frame: pd.DataFrame) -> dict[str, FieldType]:
    """Guess a field type per column from its name, then from its values, else 'text'."""
    fields: dict[str, FieldType] = {}
    for column in frame.columns:
        name = str(column).lower()
        ftype: FieldType | None = None
        for pattern, candidate in _NAME_HINTS:
            if re.search(pattern, name):
                ftype = candidate
                break
        fields[str(column)] = ftype or _type_from_values(frame[column]) or "text"
    return fields


def _schema(fields: dict[str, FieldType], thresholds: Thresholds | None) -> CanonicalSchema:
    return CanonicalSchema(
        fields={_field_name(c): {"type": t, "meaning": f"Column '{c}' of the input frame."}
                for c, t in fields.items()},
        thresholds=thresholds or Thresholds(),
    )


def _field_name(column: str) -> str:
    name = re.sub(r"[^a-z0-9_]", "_", column.lower())
    return name if re.match(r"^[a-z]", name) else "f_" + name


def _records(frame: pd.DataFrame, fields: dict[str, FieldType], source: str, id_column: str | None,
             date_formats: dict[str, str]) -> pd.DataFrame:
    ids = frame[id_column] if id_column else pd.Series(frame.index, index=frame.index)
    out = pd.DataFrame({SOURCE: source, RECORD_ID: ids.astype(str).to_numpy(),
                        ROW: range(1, len(frame) + 1), TRUST: 1, RECORD_DATE: "1970-01-01"})
    for column, ftype in fields.items():
        values = frame[column]
        if ftype == "date":
            out[_field_name(column)] = _dates(values, date_formats.get(column)).to_numpy()
        elif ftype in ("quantity", "money"):
            out[_field_name(column)] = pd.to_numeric(values, errors="coerce").to_numpy()
        else:
            out[_field_name(column)] = map_distinct(values.astype("string"), _stripped).to_numpy()
    return out


def _dates(values: pd.Series, fmt: str | None) -> pd.Series:
    """ISO text as a workspace run makes it (``mapping.dates``), so a year alone stays a year
    (``1986``) and is compared as one, instead of becoming 1 January (which made two different
    birth years look like a date with one part wrong, and two equal ones like one exact date).
    Values that layout does not read go through pandas' own parser, as before."""
    try:
        iso, _ = parse_dates(values.reset_index(drop=True), fmt)
    except ConversionError:
        iso = pd.Series(pd.NA, index=range(len(values)), dtype="string")
    iso.index = values.index
    rest = iso.isna() & values.notna()
    if rest.any():  # each distinct leftover value parsed on its own (mixed layouts in one column)
        distinct = pd.Series(pd.unique(values[rest].astype("string")), dtype="string")
        parsed = pd.to_datetime(distinct, format=fmt or "mixed", errors="coerce").dt.strftime("%Y-%m-%d")
        lookup = dict(zip(distinct.tolist(), parsed.tolist()))
        iso[rest] = values[rest].astype("string").map(lookup).astype("string")
    return iso.astype("string")


def _stripped(text: str) -> str | None:
    return text.strip() or None


def _run(records: pd.DataFrame, schema: CanonicalSchema, across: bool) -> FrameResult:
    # the same record order as a workspace run, so results never depend on the frames' row order
    records = canonical_order(records)
    match = match_records(records, schema, across_sources_only=across)
    crosswalk = pd.DataFrame({"source": records[SOURCE].to_numpy(), "record_id": records[RECORD_ID].to_numpy(),
                              "entity_id": match.entities["entity_id"].to_numpy()})
    pairs = match.pairs.assign(
        record_id_a=records[RECORD_ID].to_numpy()[match.pairs["i"].to_numpy()],
        record_id_b=records[RECORD_ID].to_numpy()[match.pairs["j"].to_numpy()],
    )
    return FrameResult(crosswalk, pairs, match, records, schema)


def deduplicate(df: pd.DataFrame, fields: dict[str, FieldType] | None = None, id_column: str | None = None,
                *, date_formats: dict[str, str] | None = None, thresholds: Thresholds | None = None
                ) -> FrameResult:
    """Find duplicate rows of one frame.

    Args:
        df: the records.
        fields: ``{column: field type}``; inferred from column names when omitted.
        id_column: column holding record IDs (default: the frame's index).
        date_formats: strftime format per date column (default: ISO 8601 / pandas' parser).

    Example:
        >>> import pandas as pd
        >>> given = "anna bruno chloe dmitri elena farid greta hugo ines jonas kofi lena marta nils olga pavel"
        >>> family = "lee park novak silva berg haddad moreau keller costa weber mensah fox rossi holm ivanova dvorak"
        >>> people = pd.DataFrame({"given_name": given.split(), "surname": family.split(),
        ...                        "dob": [f"19{60 + k}-0{1 + k % 9}-1{k % 9}" for k in range(16)]})
        >>> again = people.iloc[[0, 3, 7]].assign(surname=["lee", "silvaa", "keller"])  # one typo
        >>> result = deduplicate(pd.concat([people, again], ignore_index=True))
        >>> len(result.crosswalk), result.crosswalk["entity_id"].nunique()
        (19, 16)
    """
    fields = fields or infer_fields(df.drop(columns=[id_column]) if id_column else df)
    records = _records(df, fields, "input", id_column, date_formats or {})
    return _run(records, _schema(fields, thresholds), across=False)


def link(left: pd.DataFrame, right: pd.DataFrame, fields: dict[str, FieldType] | None = None,
         *, id_column: str | None = None, date_formats: dict[str, str] | None = None,
         thresholds: Thresholds | None = None) -> FrameResult:
    """Link the rows of two frames (pairs within one frame are not considered).

    The crosswalk's ``source`` is ``left`` or ``right``.
    """
    fields = fields or infer_fields(left.drop(columns=[id_column]) if id_column else left)
    records = pd.concat([
        _records(left, fields, "left", id_column, date_formats or {}),
        _records(right, fields, "right", id_column, date_formats or {}),
    ], ignore_index=True)
    return _run(records, _schema(fields, thresholds), across=True)
