"""Resolve each entity's fields into one merged value, with provenance for every value.

Resolution rules (set per field in the canonical schema, ``resolve:``; default ``most_common``):

- ``trust``: the most trusted source (lowest trust rank), then the most recent record;
- ``most_recent``: the record with the latest record date (a source without a record-date
  column dates its records by its as-of date), then trust;
- ``most_common``: the value most records agree on after standardisation; ties by trust, then
  recency;
- ``most_complete``: the longest value after standardisation; ties by trust, then recency;
- ``first_non_empty``: the first source in the field's ``order`` that has a value (sources not
  listed come after, by trust rank);
- ``min``, ``max``: the smallest / largest value (dates compare as dates);
- ``sum``, ``mean``: numbers. Money is summed in integer minor units of the base currency, so
  the total is exact to the minor unit; a mean of money is rounded half away from zero. ``sum``
  counts each record once, and where the field sets ``same_transaction`` (e.g. ``[source,
  record_date, deposits_gbp]``) records of one entity that agree on all those keys count once:
  the same payment exported twice is not counted twice;
- ``all``: every distinct value, joined with `` | `` (most trusted first).

Every rule breaks its last ties by source name and record ID, so the result never depends on the
order of rows. Quantities and money outside the field's plausible ``range`` never win (a unit
slip must not become the merged value); they stay visible among the alternatives.

Provenance has one row per entity and field: the chosen ``value``, the ``source`` and
``record_id`` it came from (empty for ``sum`` and ``mean``, which use every value), the ``rule``,
the number of ``candidates``, whether they ``conflict`` (differ after standardisation; never
for ``sum`` and ``all``, whose values are meant to differ), the ``alternatives`` with their
sources, and ``why``, one sentence on how the rule chose. A value whose unit was corrected on
reading (``fix_unit_slips``, named in the records' ``_unit_fixes`` column) says so: its
alternative is marked "(unit fixed: ...)" and ``why`` names the fix when the winning value, or any
value a sum or mean used, was corrected.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .columns import RECORD_DATE, RECORD_ID, SOURCE, TRUST
from .errors import MappingError
from .grouped import join_by_group
from .mapping.money import FINE_DIGITS, minor_units
from .mapping.slips import UNIT_FIXES
from .mapping.spec import CanonicalField, CanonicalSchema
from .merged_values import (
    CASED_TYPES,
    DEFAULT_DECIMALS,
    best_cased,
    date_precision,
    drop_reduced_dates,
    round_half_away,
    written_postcode,
)
from .text_normalise import clean_text, map_distinct

PROVENANCE_COLUMNS = ["entity_id", "field", "value", "source", "record_id", "rule", "candidates",
                      "conflict", "alternatives", "why"]
AGGREGATE_RULES = frozenset({"sum", "mean"})
NO_CONFLICT_RULES = frozenset({"sum", "all"})  # their values are meant to differ
NUMERIC_TYPES = frozenset({"quantity", "money"})
STANDARD_FORM_TYPES = frozenset({"email", "phone", "postcode"})
_TIE_BREAK = ["_trust", "_date_rank", "_source", "_rid"]


def with_standard_forms(records: pd.DataFrame, canonical: CanonicalSchema,
                        prepared: pd.DataFrame | None) -> pd.DataFrame:
    """E-mails, phones and postcodes in their standard form (E.164, upper-case postcodes), where known."""
    if prepared is None:
        return records
    records = records.copy()
    for name, spec in canonical.fields.items():
        if spec.type in STANDARD_FORM_TYPES and name in prepared.columns:
            records[name] = prepared[name].to_numpy()
    return records


def _long(records: pd.DataFrame, entity_ids: np.ndarray, name: str, spec: CanonicalField) -> pd.DataFrame:
    """One row per non-empty value of one field: entity, value, its record and the tie-break keys."""
    values = records[name]
    keep = values.notna().to_numpy()
    long = pd.DataFrame({
        "entity_id": entity_ids[keep],
        "value": values.to_numpy(dtype=object)[keep],
        "_source": records[SOURCE].astype(str).to_numpy()[keep],
        "_rid": records[RECORD_ID].astype(str).to_numpy()[keep],
        "_trust": records[TRUST].to_numpy()[keep],
        "_date": records[RECORD_DATE].astype(str).to_numpy()[keep],
    })
    # newest first: rank dates descending so every sort below can be ascending
    long["_date_rank"] = -pd.to_datetime(long["_date"], errors="coerce").fillna(pd.Timestamp(0)).astype("int64")
    if spec.type in NUMERIC_TYPES:
        long["value"] = long["value"].astype(float)
        long["_norm"] = long["value"].round(6).astype(str)
        long["_fix"] = _unit_fix_notes(records, name)[keep]
    else:
        long["value"] = long["value"].astype(str)
        long["_norm"] = map_distinct(long["value"], clean_text).fillna("").to_numpy()
        long = long[long["_norm"] != ""]  # blank text is no value
    for key in spec.same_transaction or ():
        if key not in ("source", "record_date", name):
            other = records[key].astype("string").fillna("").to_numpy()[keep]
            long["_tx_" + key] = other[long.index.to_numpy()]
    return long.reset_index(drop=True)


def _unit_fix_notes(records: pd.DataFrame, name: str) -> np.ndarray:
    """Each record's note on a unit corrected in field ``name`` ('read as centimetres (cm), not
    inches (in)'), or '' (notes are parsed once per distinct ``_unit_fixes`` text)."""
    if UNIT_FIXES not in records.columns:
        return np.full(len(records), "", dtype=object)
    prefix = name + ": "

    def own(text: str) -> str:
        return next((part[len(prefix):] for part in text.split("; ") if part.startswith(prefix)), "")

    notes = records[UNIT_FIXES].astype("string")
    return map_distinct(notes.fillna(""), own).fillna("").to_numpy(dtype=object)


def _pick(long: pd.DataFrame, rule: str, spec: CanonicalField) -> pd.DataFrame:
    """One winning row per entity for a choosing rule (sorted so the winner comes first)."""
    if rule == "most_common":
        long = long.assign(_count=-long.groupby(["entity_id", "_norm"])["_norm"].transform("size"))
        order = ["_count"] + _TIE_BREAK
    elif rule == "most_recent":
        order = ["_date_rank", "_trust", "_source", "_rid"]
    elif rule == "most_complete":
        long = long.assign(_len=-long["_norm"].str.len())
        order = ["_len"] + _TIE_BREAK
    elif rule == "first_non_empty":
        preferred = {source: k for k, source in enumerate(spec.order or ())}
        long = long.assign(_order=long["_source"].map(preferred).fillna(len(preferred)))
        order = ["_order"] + _TIE_BREAK
    elif rule in ("min", "max"):
        key = long["value"] if spec.type in NUMERIC_TYPES else long["_sortable"]
        rank = key.rank(method="dense")
        long = long.assign(_num=rank if rule == "min" else -rank)
        order = ["_num"] + _TIE_BREAK
    else:  # trust, and the first value of 'all'
        order = _TIE_BREAK
    return long.sort_values(["entity_id"] + order, kind="mergesort").drop_duplicates("entity_id")


def _sum_once(long: pd.DataFrame, name: str, spec: CanonicalField) -> pd.DataFrame:
    """The values a ``sum`` adds: each record once, and one per transaction where keys say so."""
    once = long.drop_duplicates(["entity_id", "_source", "_rid"])
    if spec.same_transaction:
        mapped = {"source": "_source", "record_date": "_date", name: "_norm"}
        keys = [mapped.get(k, "_tx_" + k) for k in spec.same_transaction]
        once = once.sort_values(["entity_id"] + _TIE_BREAK, kind="mergesort").drop_duplicates(["entity_id"] + keys)
    return once


def _aggregate(long: pd.DataFrame, rule: str, ftype: str, digits: int) -> pd.DataFrame:
    if ftype == "money":
        # integer units finer than the minor unit: exact sums, no float drift, and no payment
        # rounded before it is added; the total is rounded once, half away from zero
        fine = 10 ** FINE_DIGITS
        units = pd.Series(np.round(long["value"].to_numpy() * 10 ** digits * fine).astype(np.int64),
                          index=long.index)
        total = units.groupby(long["entity_id"]).sum()
        count = units.groupby(long["entity_id"]).size() if rule == "mean" else pd.Series(1, index=total.index)
        t, c = total.to_numpy(), count.to_numpy() * fine
        minor = np.sign(t) * ((2 * np.abs(t) + c) // (2 * c))
        value = pd.Series(minor / 10 ** digits, index=total.index)
    else:
        grouped = long.groupby("entity_id", sort=True)["value"]
        value = grouped.sum() if rule == "sum" else grouped.mean()
    return pd.DataFrame({"entity_id": value.index, "value": value.to_numpy(), "_source": "", "_rid": ""})


def check_orders(canonical: CanonicalSchema, sources: list[str], file: str | None = None) -> None:
    """Every source named in a field's ``order`` must be a source of the workspace.

    Raises:
        MappingError: ``unknown_source`` naming the field and the source.
    """
    for name, spec in canonical.fields.items():
        for source in spec.order or ():
            if source not in sources:
                raise MappingError(f"field '{name}': order names source '{source}', which has no mapping file",
                                   file=file, value=source, reason="unknown_source",
                                   hint=f"sources are: {', '.join(sorted(sources))}")


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
        >>> merged["email"].tolist(), prov["source"].tolist(), prov["why"].tolist()
        (['y@example.org'], ['b'], ['2 of 3 values agree; most trusted of them'])
    """
    # entities are numbered in the order of their IDs: every group and sort below runs on integers
    ids, entity_names = _entity_numbers(entity_ids)
    records = with_standard_forms(records, canonical, prepared)
    merged = pd.DataFrame(index=pd.RangeIndex(len(entity_names), name="entity_id"))
    prov_parts: list[pd.DataFrame] = []
    for name, spec in canonical.fields.items():
        long = _long(records, ids, name, spec)
        excluded = np.zeros(len(long), bool)
        if spec.range is not None and spec.type in NUMERIC_TYPES:
            excluded = ~long["value"].between(*spec.range).to_numpy()
        long["_excluded"] = excluded
        if spec.type not in NUMERIC_TYPES:
            # for min / max: a year alone sorts before every full date of that year
            year_only = (long["value"].str.len() == 4) & (spec.type == "date")
            long["_sortable"] = long["value"].where(~year_only, long["value"] + "-00-00")
        usable = long[~long["_excluded"]]
        if spec.type == "date" and spec.resolve not in ("min", "max", "all"):
            usable = drop_reduced_dates(usable)  # a full date beats a year alone
        digits = minor_units(canonical.base_currency) if spec.type == "money" else 0
        counted = usable
        if spec.resolve in AGGREGATE_RULES and spec.type in NUMERIC_TYPES:
            counted = _sum_once(usable, name, spec) if spec.resolve == "sum" else usable
            chosen = _aggregate(counted, spec.resolve, spec.type, digits)
        elif spec.resolve == "all":
            distinct = usable.sort_values(["entity_id"] + _TIE_BREAK, kind="mergesort").drop_duplicates(
                ["entity_id", "_norm"])
            shown = _shown(distinct["value"], spec, digits)
            joined = shown.groupby(distinct["entity_id"], sort=True).agg(" | ".join)
            first = _pick(usable, "trust", spec).set_index("entity_id").loc[joined.index]
            chosen = pd.DataFrame({"entity_id": joined.index, "value": joined.to_numpy(),
                                   "_source": first["_source"].to_numpy(), "_rid": first["_rid"].to_numpy()})
        else:
            chosen = _pick(usable, spec.resolve, spec)
            if spec.type in CASED_TYPES:
                chosen = best_cased(usable, chosen)
        if spec.resolve == "sum" and spec.empty_sum == "zero":
            missing = merged.index.difference(pd.Index(chosen["entity_id"]))
            chosen = pd.concat([chosen, pd.DataFrame({"entity_id": missing, "value": 0.0, "_source": "",
                                                      "_rid": ""})], ignore_index=True)
        if spec.type == "money" and spec.resolve != "all":
            # converted amounts arrive finer than the minor unit (mapping.money.FINE_DIGITS): round once, here
            chosen = chosen.assign(value=round_half_away(chosen["value"].astype(float).to_numpy(), digits))
        elif spec.type == "quantity" and spec.resolve != "all":
            places = DEFAULT_DECIMALS if spec.decimals is None else spec.decimals
            chosen = chosen.assign(value=round_half_away(chosen["value"].astype(float).to_numpy(), places))
        elif spec.type == "postcode" and spec.resolve != "all":
            chosen = chosen.assign(value=map_distinct(chosen["value"].astype(str), written_postcode).to_numpy())
        merged[name] = pd.Series(chosen["value"].to_numpy(), index=chosen["entity_id"].to_numpy())
        prov_parts.append(_provenance(long, usable, counted, chosen, name, spec, digits, merged.index))
    merged = merged.reset_index()
    merged["entity_id"] = entity_names[merged["entity_id"].to_numpy()]
    for name, spec in canonical.fields.items():
        numeric = spec.type in NUMERIC_TYPES and spec.resolve != "all"  # 'all' lists values as text
        merged[name] = merged[name].astype("float64" if numeric else "string")
    merged = _with_counts(merged, records, entity_names[ids], canonical)
    # Written files show money with its currency's minor units ('20.00') and quantities with the
    # field's decimals; the numbers themselves stay floats for analysis (see outputs.tables).
    merged.attrs["decimals"] = {
        name: minor_units(canonical.base_currency) if spec.type == "money"
        else (DEFAULT_DECIMALS if spec.decimals is None else spec.decimals)
        for name, spec in canonical.fields.items() if spec.type in NUMERIC_TYPES and spec.resolve != "all"}
    provenance = pd.concat(prov_parts, ignore_index=True) if prov_parts else pd.DataFrame(
        columns=PROVENANCE_COLUMNS)
    if prov_parts:
        provenance["entity_id"] = entity_names[provenance["entity_id"].to_numpy(dtype=np.int64)]
    return merged, provenance


def _entity_numbers(entity_ids: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Each record's entity as a number (0..k-1, in the order of the IDs), and the IDs by number."""
    codes, names = pd.factorize(pd.Series(entity_ids.to_numpy(), dtype=object), sort=True)
    return codes.astype(np.int64), np.asarray(names, dtype=object)


def _with_counts(merged: pd.DataFrame, records: pd.DataFrame, ids: np.ndarray,
                 canonical: CanonicalSchema) -> pd.DataFrame:
    """``records`` and ``sources`` per entity after the ID, and ``<date>_precision`` after each date."""
    members = pd.DataFrame({"entity_id": ids, "source": records[SOURCE].astype(str).to_numpy()})
    grouped = members.groupby("entity_id")["source"]
    merged.insert(1, "records", merged["entity_id"].map(grouped.size()).fillna(0).astype("int64"))
    merged.insert(2, "sources", merged["entity_id"].map(grouped.nunique()).fillna(0).astype("int64"))
    for name, spec in canonical.fields.items():
        if spec.type == "date" and spec.resolve != "all":
            merged.insert(merged.columns.get_loc(name) + 1, name + "_precision", date_precision(merged[name]))
    return merged


def _shown(values: pd.Series, spec: CanonicalField, digits: int) -> pd.Series:
    """Values as provenance shows them: money with its minor digits, quantities without float noise."""
    if spec.type not in NUMERIC_TYPES or not pd.api.types.is_numeric_dtype(values):  # 'all' lists are text
        return values.astype(object).where(values.notna(), "").astype(str)
    number = values.astype(float).to_numpy()
    if spec.type == "money":
        number = round_half_away(number, digits)  # half up, as merged money is rounded
    text = np.char.mod(f"%.{digits}f" if spec.type == "money" else "%.10g", number).astype(object)
    return pd.Series(np.where(np.isnan(number), "", text), index=values.index, dtype=object)


def _provenance(long: pd.DataFrame, usable: pd.DataFrame, counted: pd.DataFrame, chosen: pd.DataFrame,
                name: str, spec: CanonicalField, digits: int, entities: pd.Index) -> pd.DataFrame:
    stats = long.groupby("entity_id").agg(candidates=("_norm", "size"), distinct=("_norm", "nunique"),
                                          excluded=("_excluded", "sum"))
    label = _shown(long["value"], spec, digits) + " [" + long["_source"] + ":" + long["_rid"] + "]"
    label = label.where(~long["_excluded"], label + " (out of range)")
    fixes = long["_fix"] if "_fix" in long else pd.Series("", index=long.index)
    label = label.where(fixes.eq(""), label + " (unit fixed: " + fixes + ")")
    alternatives = join_by_group(label, long["entity_id"])
    out = chosen.rename(columns={"_source": "source", "_rid": "record_id"}).set_index("entity_id")
    # every entity has a row: one without a usable value (none, or only out-of-range ones) shows it empty
    out = out.join(stats, how="outer").join(alternatives.rename("alternatives"), how="left").reindex(entities)
    out["why"] = _why(out, usable, counted, spec) + _fix_note(chosen, counted, spec).reindex(out.index).fillna("")
    conflict = (out["distinct"].fillna(0) > 1).to_numpy() & (spec.resolve not in NO_CONFLICT_RULES)
    return pd.DataFrame({
        "entity_id": out.index.to_numpy(),
        "field": name,
        "value": _shown(out["value"], spec, digits).to_numpy(),
        "source": out["source"].fillna("").to_numpy(),
        "record_id": out["record_id"].fillna("").to_numpy(),
        "rule": spec.resolve,
        "candidates": out["candidates"].fillna(0).astype(int).to_numpy(),
        "conflict": conflict,
        "alternatives": out["alternatives"].fillna("").to_numpy(),
        "why": out["why"].to_numpy(),
    })


def _fix_note(chosen: pd.DataFrame, counted: pd.DataFrame, spec: CanonicalField) -> pd.Series:
    """Per entity, the clause ``why`` adds for corrected units: the winner's fix, or for a sum or
    mean how many of the values it used were corrected ('' where none was)."""
    if "_fix" not in counted:
        return pd.Series(dtype=object)
    if spec.resolve in AGGREGATE_RULES:
        fixed = counted["_fix"].ne("").groupby(counted["entity_id"]).sum()
        fixed = fixed[fixed > 0]
        noun = pd.Series(np.where(fixed == 1, " value", " values"), index=fixed.index)
        return "; " + fixed.astype(str) + noun + " read in another unit (fix_unit_slips)"
    if "_fix" not in chosen:
        return pd.Series(dtype=object)
    won = chosen[chosen["_fix"].ne("")]
    return pd.Series(("; unit fixed: " + won["_fix"]).to_numpy(), index=won["entity_id"].to_numpy())


def _why(out: pd.DataFrame, usable: pd.DataFrame, counted: pd.DataFrame, spec: CanonicalField) -> pd.Series:
    """One sentence per entity on how its value was chosen (built column-wise)."""
    n = usable.groupby("entity_id").size().reindex(out.index).fillna(0).astype(int)
    text = n.astype(str)
    rule = spec.resolve
    if rule == "most_common":
        agree = usable.groupby(["entity_id", "_norm"]).size().groupby("entity_id").max().reindex(out.index)
        base = agree.fillna(0).astype(int).astype(str) + " of " + text + " values agree; most trusted of them"
    elif rule == "sum":
        used = counted.groupby("entity_id").size().reindex(out.index).fillna(0).astype(int)
        base = "sum of " + used.astype(str) + " values"
        twice = n - used
        base = base.where(twice == 0, base + " (" + twice.astype(str) + " counted once as the same transaction)")
    else:
        fixed = {
            "trust": "from the most trusted source with a value",
            "most_recent": "from the newest record",
            "most_complete": "the longest value after standardisation",
            "first_non_empty": f"from the first source with a value, in the order {', '.join(spec.order or ())}",
            "min": "the smallest value", "max": "the largest value",
            "mean": "the mean of the values", "all": "every distinct value",
        }[rule]
        base = pd.Series(fixed, index=out.index) + " (" + text + " values)"
    base = base.where(n != 1, "the only value")
    excluded = out["excluded"].fillna(0).astype(int)
    base = base.where(excluded == 0, base + "; " + excluded.astype(str) + " out of range left out")
    empty = "no amounts: 0 (empty_sum: zero)" if rule == "sum" and spec.empty_sum == "zero" else "no usable value"
    return base.where(n > 0, empty)


def source_pair_conflicts(records: pd.DataFrame, entity_ids: pd.Series, canonical: CanonicalSchema,
                          prepared: pd.DataFrame | None = None) -> pd.DataFrame:
    """Per field and pair of sources: entities where a value from one differs from a value from the other.

    Values are compared after standardisation; a pair of records of one source counts under
    (source, source). Fields resolved by ``sum`` or ``all`` are left out (their values are meant
    to differ).

    Returns:
        columns ``field``, ``source_a``, ``source_b`` (in text order), ``entities``.
    """
    ids, _ = _entity_numbers(entity_ids)  # counted per entity: numbers do as well as IDs
    records = with_standard_forms(records, canonical, prepared)
    parts = []
    for name, spec in canonical.fields.items():
        if spec.resolve in NO_CONFLICT_RULES:
            continue
        values = _long(records, ids, name, spec)[["entity_id", "_source", "_norm"]].drop_duplicates()
        conflicted = values.groupby("entity_id")["_norm"].transform("nunique") > 1
        values = values[conflicted]
        both = values.merge(values, on="entity_id", suffixes=("_a", "_b"))
        keep = (both["_norm_a"] != both["_norm_b"]) & (both["_source_a"] <= both["_source_b"])
        pairs = both.loc[keep, ["entity_id", "_source_a", "_source_b"]].drop_duplicates()
        counts = pairs.groupby(["_source_a", "_source_b"]).size().rename("entities").reset_index()
        parts.append(counts.rename(columns={"_source_a": "source_a", "_source_b": "source_b"}).assign(field=name))
    if not parts:
        return pd.DataFrame(columns=["field", "source_a", "source_b", "entities"])
    table = pd.concat(parts, ignore_index=True)[["field", "source_a", "source_b", "entities"]]
    return table.sort_values(["entities", "field", "source_a", "source_b"], ascending=[False, True, True, True],
                             kind="mergesort").reset_index(drop=True)
