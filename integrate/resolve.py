"""Resolve each entity's fields into one merged value, with provenance for every value.

Resolution rules (set per field in the canonical schema):
``trust`` most trusted source first, then most recent; ``most_recent``; ``most_common`` (ties by
trust, then recency); ``most_complete`` (longest value); ``min``, ``max``, ``mean``, ``sum``
(money summed in integer minor units, so the total is exact); ``all`` keeps every distinct value.
Quantities outside the field's plausible range never win (a unit slip must not become the
merged value); they stay visible among the alternatives.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .columns import RECORD_DATE, RECORD_ID, SOURCE, TRUST
from .mapping.money import minor_units
from .mapping.spec import CanonicalSchema
from .text_normalise import clean_text, map_distinct

PROVENANCE_COLUMNS = ["entity_id", "field", "value", "source", "record_id", "rule", "candidates",
                      "conflict", "alternatives"]
AGGREGATE_RULES = frozenset({"sum", "mean"})
STANDARD_FORM_TYPES = frozenset({"email", "phone", "postcode"})
_TIE_BREAK = ["_trust", "_date_rank", "_source", "_rid"]


def _long(records: pd.DataFrame, entity_ids: pd.Series, name: str, ftype: str) -> pd.DataFrame:
    values = records[name]
    keep = values.notna().to_numpy()
    long = pd.DataFrame({
        "entity_id": entity_ids.to_numpy()[keep],
        "value": values.to_numpy(dtype=object)[keep],
        "_source": records[SOURCE].astype(str).to_numpy()[keep],
        "_rid": records[RECORD_ID].astype(str).to_numpy()[keep],
        "_trust": records[TRUST].to_numpy()[keep],
        "_date": records[RECORD_DATE].astype(str).to_numpy()[keep],
    })
    # newest first: rank dates descending so every sort below can be ascending
    long["_date_rank"] = -pd.to_datetime(long["_date"], errors="coerce").fillna(pd.Timestamp(0)).astype("int64")
    if ftype in ("quantity", "money"):
        long["value"] = long["value"].astype(float)
        long["_norm"] = long["value"].round(6).astype(str)
    else:
        long["value"] = long["value"].astype(str)
        long["_norm"] = map_distinct(long["value"], clean_text).fillna("").to_numpy()
    return long


def _pick(long: pd.DataFrame, rule: str) -> pd.DataFrame:
    """One winning row per entity for a choosing rule."""
    if rule == "most_common":
        long = long.assign(_count=-long.groupby(["entity_id", "_norm"])["_norm"].transform("size"))
        order = ["_count"] + _TIE_BREAK
    elif rule == "most_recent":
        order = ["_date_rank", "_trust", "_source", "_rid"]
    elif rule == "most_complete":
        long = long.assign(_len=-long["value"].astype(str).str.len())
        order = ["_len"] + _TIE_BREAK
    elif rule in ("min", "max"):
        rank = long["value"].rank(method="dense")
        long = long.assign(_num=rank if rule == "min" else -rank)
        order = ["_num"] + _TIE_BREAK
    else:  # trust (and the fallback for 'all')
        order = _TIE_BREAK
    return long.sort_values(["entity_id"] + order, kind="mergesort").drop_duplicates("entity_id")


def _aggregate(long: pd.DataFrame, rule: str, ftype: str, digits: int) -> pd.DataFrame:
    grouped = long.groupby("entity_id", sort=True)
    if rule == "sum" and ftype == "money":
        # integer minor units: exact sums, no float drift
        scale = 10 ** digits
        cents = np.round(long["value"].to_numpy() * scale).astype(np.int64)
        value = pd.Series(cents, index=long.index).groupby(long["entity_id"]).sum() / scale
    elif rule == "sum":
        value = grouped["value"].sum()
    else:
        value = grouped["value"].mean()
    return pd.DataFrame({"entity_id": value.index, "value": value.to_numpy(), "_source": "",
                         "_rid": ""})


def resolve(records: pd.DataFrame, entity_ids: pd.Series, canonical: CanonicalSchema,
            prepared: pd.DataFrame | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Merged table (one row per entity) and provenance (one row per entity and field).

    Args:
        prepared: standardised values (from ``standardise``); where given, e-mails, phones and
            postcodes are merged in their standard form (E.164 phones, upper-case postcodes).

    Example:
        >>> import pandas as pd
        >>> from integrate.mapping.spec import CanonicalSchema
        >>> schema = CanonicalSchema(fields={"email": {"type": "email", "meaning": "Contact e-mail address.",
        ...                                            "resolve": "most_common"}})
        >>> records = pd.DataFrame({"_source": ["a", "b", "c"], "_record_id": ["1", "2", "3"],
        ...     "_trust": [1, 2, 3], "_record_date": ["2026-01-01"] * 3,
        ...     "email": ["x@example.org", "y@example.org", "y@example.org"]})
        >>> merged, prov = resolve(records, pd.Series(["E1", "E1", "E1"]), schema)
        >>> merged["email"].tolist(), prov["source"].tolist()
        (['y@example.org'], ['b'])
    """
    entity_ids = pd.Series(entity_ids.to_numpy(), index=records.index)
    all_entities = pd.Index(sorted(entity_ids.unique()), name="entity_id")
    merged = pd.DataFrame(index=all_entities)
    prov_parts: list[pd.DataFrame] = []
    if prepared is not None:
        records = records.copy()
        for name, spec in canonical.fields.items():
            if spec.type in STANDARD_FORM_TYPES and name in prepared.columns:
                records[name] = prepared[name].to_numpy()
    for name, spec in canonical.fields.items():
        long = _long(records, entity_ids, name, spec.type)
        if spec.range is not None and spec.type in ("quantity", "money"):
            low, high = spec.range
            plausible = long["value"].between(low, high)
            long = long.assign(_excluded=~plausible)
        else:
            long = long.assign(_excluded=False)
        usable = long[~long["_excluded"]]
        digits = minor_units(canonical.base_currency) if spec.type == "money" else 0
        if spec.resolve in AGGREGATE_RULES and spec.type in ("quantity", "money"):
            usable = usable.drop_duplicates(["entity_id", "_source", "_rid"])
            chosen = _aggregate(usable, spec.resolve, spec.type, digits)
        elif spec.resolve == "all":
            distinct = usable.sort_values(["entity_id"] + _TIE_BREAK, kind="mergesort").drop_duplicates(
                ["entity_id", "_norm"])
            joined = distinct.groupby("entity_id", sort=True)["value"].agg(lambda v: " | ".join(map(str, v)))
            first = _pick(usable, "trust").set_index("entity_id")
            chosen = pd.DataFrame({"entity_id": joined.index, "value": joined.to_numpy(),
                                   "_source": first.loc[joined.index, "_source"].to_numpy(),
                                   "_rid": first.loc[joined.index, "_rid"].to_numpy()})
        else:
            chosen = _pick(usable, spec.resolve)[["entity_id", "value", "_source", "_rid"]]
        if spec.type == "money":
            chosen["value"] = chosen["value"].astype(float).round(digits)
        merged[name] = pd.Series(chosen["value"].to_numpy(), index=chosen["entity_id"].to_numpy())
        prov_parts.append(_provenance(long, chosen, name, spec.resolve))
    merged = merged.reset_index()
    for name, spec in canonical.fields.items():
        if spec.type in ("quantity", "money"):
            merged[name] = merged[name].astype("float64")
        else:
            merged[name] = merged[name].astype("string")
    provenance = pd.concat(prov_parts, ignore_index=True) if prov_parts else pd.DataFrame(
        columns=PROVENANCE_COLUMNS)
    return merged, provenance


def _provenance(long: pd.DataFrame, chosen: pd.DataFrame, name: str, rule: str) -> pd.DataFrame:
    stats = long.groupby("entity_id").agg(candidates=("_norm", "size"), distinct=("_norm", "nunique"))
    label = long["value"].astype(str) + " [" + long["_source"] + ":" + long["_rid"] + "]"
    label = label.where(~long["_excluded"], label + " (out of range)")
    alternatives = label.groupby(long["entity_id"]).agg(lambda v: "; ".join(v))
    out = chosen.rename(columns={"_source": "source", "_rid": "record_id"}).set_index("entity_id")
    # entities whose only values were excluded (out of range) keep a row with an empty value
    out = out.join(stats, how="outer").join(alternatives.rename("alternatives"), how="left")
    out["source"] = out["source"].fillna("")
    out["record_id"] = out["record_id"].fillna("")
    return pd.DataFrame({
        "entity_id": out.index.to_numpy(),
        "field": name,
        "value": out["value"].astype(object).where(out["value"].notna(), "").astype(str).to_numpy(),
        "source": out["source"].to_numpy(),
        "record_id": out["record_id"].to_numpy(),
        "rule": rule,
        "candidates": out["candidates"].fillna(0).astype(int).to_numpy(),
        "conflict": (out["distinct"].fillna(0) > 1).to_numpy(),
        "alternatives": out["alternatives"].fillna("").to_numpy(),
    })
