"""Merged values ready for analysis: the written form of a value once a rule has chosen it.

- Names and free text take the best-cased form among the candidates that agree with the winner
  after standardisation. The case rule: a form mixing capitals and small letters ('Fiona',
  'McLeod') beats one in a single case ('FIONA', 'fiona'); among equals the commoner form wins,
  then the rule's own winner. A form is never invented: if every candidate is in one case, the
  winner stays as it is.
- Postcodes in their standard written form: a UK postcode as outward code, one space, inward
  code ('TK14 8YS'; BS 7666); any other postcode upper-case without spaces.
- Dates: where an entity has both year-only values and full dates, the year-only values do not
  compete; the merged table says each date's precision (``<field>_precision``: ``day``,
  ``month`` or ``year``, ISO 8601's reduced precision: '1969' is precise to the year).
- Quantities rounded to the field's ``decimals`` (default 2); money to its currency's minor
  units (ISO 4217; ``mapping.money.minor_units``).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

DEFAULT_DECIMALS = 2
CASED_TYPES = frozenset({"person_name", "text"})
_UK_POSTCODE = re.compile(r"^([A-Z]{1,2}[0-9][A-Z0-9]?)([0-9][A-Z]{2})$")


def case_rank(values: pd.Series) -> np.ndarray:
    """0 for a form mixing capitals and small letters, 1 for a single case (or no letters)."""
    text = values.astype(str)
    mixed = (text != text.str.upper()) & (text != text.str.lower())
    return np.where(mixed.to_numpy(), 0, 1)


def best_cased(usable: pd.DataFrame, chosen: pd.DataFrame) -> pd.DataFrame:
    """``chosen`` with each value replaced by the best-cased form among the candidates of its
    entity that standardise alike (columns ``entity_id``, ``value``, ``_norm``)."""
    if chosen.empty or "_norm" not in chosen:
        return chosen
    winners = chosen[["entity_id", "_norm", "_source", "_rid"]].rename(
        columns={"_source": "_winner_source", "_rid": "_winner_rid"})
    same = usable[["entity_id", "_norm", "value", "_source", "_rid"]].merge(winners, on=["entity_id", "_norm"])
    is_winner = (same["_source"] == same["_winner_source"]) & (same["_rid"] == same["_winner_rid"])
    same = same.assign(_case=case_rank(same["value"]),
                       _count=-same.groupby(["entity_id", "value"])["value"].transform("size"),
                       _is_winner=np.where(is_winner, 0, 1))
    best = same.sort_values(["entity_id", "_case", "_count", "_is_winner", "_source", "_rid"], kind="mergesort")
    best = best.drop_duplicates("entity_id").set_index("entity_id")
    out = chosen.copy()
    for column in ("value", "_source", "_rid"):  # provenance names the record the form came from
        out[column] = out["entity_id"].map(best[column]).fillna(out[column])
    return out


def written_postcode(value: str) -> str:
    """'tk148ys' -> 'TK14 8YS'; a postcode in another country's pattern is only upper-cased."""
    compact = re.sub(r"[^0-9A-Za-z]", "", value).upper()
    m = _UK_POSTCODE.match(compact)
    return f"{m.group(1)} {m.group(2)}" if m else compact


def date_precision(values: pd.Series) -> pd.Series:
    """'day', 'month' or 'year' for ISO 8601 dates of full or reduced precision; empty where none."""
    text = values.astype("string")
    length = text.str.len()
    out = pd.Series(pd.NA, index=values.index, dtype="string")
    out[length == 4] = "year"
    out[length == 7] = "month"
    out[length >= 10] = "day"
    return out


def drop_reduced_dates(usable: pd.DataFrame) -> pd.DataFrame:
    """Rows of date values, without the less precise ones of an entity that has a more precise one."""
    length = usable["value"].astype(str).str.len()
    best = length.groupby(usable["entity_id"]).transform("max")
    return usable[length.to_numpy() >= np.minimum(best.to_numpy(), 10)]


def round_half_away(values: np.ndarray, digits: int) -> np.ndarray:
    """Round half away from zero at ``digits`` places (as money is rounded), via integers."""
    scale = 10.0 ** digits
    return np.sign(values) * np.floor(np.abs(values) * scale + 0.5 + 1e-9) / scale
