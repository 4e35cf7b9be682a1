"""Missing values before and after merging: what integration bought, field by field (``missing.csv``).

For every canonical field, over all entities of the run:

- ``missing_best_source``: the share of entities without a value for the field if only one export
  were used, the export that leaves the fewest such entities (``best_source``; an entity the
  export does not hold at all counts as missing: that is what using one export means);
- ``missing_merged``: the share of entities whose merged value is empty after merging every source;
- ``gaps_filled``: entities the best source leaves empty that the merged table fills;
- ``filled_from_<source>``: how many of those gaps each other source's values filled (the source
  the merged value came from; a value summed over several sources counts for each of them);
- ``filled_by_rule``: gaps filled with no source holding a value (a sum of nothing written as
  zero, ``empty_sum: zero``): a value the rule supplied, not the data.

Empty means missing (NA) or blank text. Computed with grouped boolean reductions, no row loops.

Example:
    >>> import pandas as pd
    >>> records = pd.DataFrame({"_source": ["a", "b", "b"], "_record_id": ["1", "1", "2"],
    ...                         "email": ["x@example.org", None, "y@example.org"]})
    >>> crosswalk = pd.DataFrame({"source": ["a", "b", "b"], "record_id": ["1", "1", "2"],
    ...                           "entity_id": ["E1", "E1", "E2"]})
    >>> merged = pd.DataFrame({"entity_id": ["E1", "E2"], "email": ["x@example.org", "y@example.org"]})
    >>> provenance = pd.DataFrame({"entity_id": ["E1", "E2"], "field": ["email", "email"], "source": ["a", "b"]})
    >>> table = missing_values(records, crosswalk, merged, provenance, ["email"])
    >>> table[["field", "best_source", "missing_best_source", "missing_merged", "gaps_filled",
    ...        "filled_from_b"]].values.tolist()
    [['email', 'a', 0.5, 0.0, 1, 1]]
"""

from __future__ import annotations

import html
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .cells import is_text

if TYPE_CHECKING:
    from ..pipeline import RunResult

BASE_COLUMNS = ["field", "entities", "best_source", "missing_best_source", "missing_merged", "gaps_filled",
                "filled_by_rule"]


def present(frame: pd.DataFrame) -> pd.DataFrame:
    """True where a cell holds a value (not NA, not blank text)."""
    out = frame.notna()
    for column in frame.columns:
        if is_text(frame[column]):
            codes, distinct = pd.factorize(frame[column])  # each distinct value is looked at once
            blank = pd.Index(distinct.astype(object)).astype(str).str.strip() == ""
            filled = np.append(~np.asarray(blank, dtype=bool), False)
            out[column] &= filled[codes]  # code -1 (missing) picks the last entry
    return out


def missing_values(records: pd.DataFrame, crosswalk: pd.DataFrame, merged: pd.DataFrame,
                   provenance: pd.DataFrame, fields: Sequence[str]) -> pd.DataFrame:
    """The missing-value table (see the module docstring); one row per field, in the given order."""
    fields = [f for f in fields if f in records.columns and f in merged.columns]
    sources = sorted(records["_source"].astype(str).unique())
    key = pd.MultiIndex.from_arrays([crosswalk["source"].astype(str), crosswalk["record_id"].astype(str)])
    entity_of = pd.Series(crosswalk["entity_id"].astype(str).to_numpy(), index=key)
    record_key = pd.MultiIndex.from_arrays([records["_source"].astype(str), records["_record_id"].astype(str)])
    entity = entity_of.reindex(record_key).to_numpy()
    has = present(records[fields])
    has["_entity"], has["_source"] = entity, records["_source"].astype(str).to_numpy()
    has = has[pd.notna(has["_entity"])]
    # per (entity, source): does any of the source's records about the entity hold the field?
    held = has.groupby(["_entity", "_source"], sort=True)[fields].any()
    entities = pd.Index(merged["entity_id"].astype(str))
    n = len(entities)
    merged_has = present(merged[fields]).set_axis(entities)
    winners = provenance[["entity_id", "field", "source"]]
    winners = winners.assign(entity_id=winners["entity_id"].astype(str),
                             source=winners["source"].astype("string").fillna(""))
    by_field = {name: part for name, part in winners.groupby("field", sort=False)}  # one pass, not one per field
    rows = []
    for field in fields:  # a loop over columns, not rows
        counts = held[field].groupby(level="_source").sum().reindex(sources, fill_value=0)
        best = str(counts.idxmax()) if len(counts) else ""
        best_has = (held[field].xs(best, level="_source").reindex(entities, fill_value=False)
                    if best else pd.Series(False, index=entities))
        gaps = merged_has[field] & ~best_has.to_numpy()
        gap_ids = entities[gaps.to_numpy()]
        filled, by_rule = _contributors(by_field.get(field, winners.iloc[:0]), held[field], gap_ids)
        row = {"field": field, "entities": n, "best_source": best,
               "missing_best_source": round(1 - int(counts.max() if len(counts) else 0) / n, 6) if n else 0.0,
               "missing_merged": round(1 - int(merged_has[field].sum()) / n, 6) if n else 0.0,
               "gaps_filled": len(gap_ids), "filled_by_rule": by_rule}
        row.update({f"filled_from_{s}": int(filled.get(s, 0)) for s in sources})
        rows.append(row)
    return pd.DataFrame(rows, columns=BASE_COLUMNS + [f"filled_from_{s}" for s in sources])


def _contributors(winners: pd.DataFrame, held: pd.Series, gap_ids: pd.Index) -> tuple[pd.Series, int]:
    """Per source, how many gap entities its values filled: the merged value's source, or, where the
    value has no single source (a sum), every source holding a value for the entity; and how many
    gaps no source held a value for (filled by the rule)."""
    chosen = winners[winners["entity_id"].isin(gap_ids)]
    single = chosen.loc[chosen["source"] != "", "source"].value_counts()
    several = pd.Index(chosen.loc[chosen["source"] == "", "entity_id"]).union(
        gap_ids.difference(pd.Index(chosen["entity_id"])))
    by_rule = 0
    if len(several):
        holding = held[held]
        holding = holding[holding.index.get_level_values("_entity").isin(several)]
        single = single.add(pd.Series(holding.index.get_level_values("_source")).value_counts(), fill_value=0)
        by_rule = len(several.difference(pd.Index(holding.index.get_level_values("_entity"))))
    return single, by_rule


def run_missing_values(result: RunResult, fields: Sequence[str]) -> pd.DataFrame:
    """The table for a finished run."""
    return missing_values(result.records, result.crosswalk, result.merged, result.provenance, fields)


def missing_section(result: RunResult) -> str:
    """The run report's section (HTML): one row per field, shares as percentages."""
    table = getattr(result, "missing", None)
    if table is None:
        fields = [c for c in result.merged.columns if c != "entity_id"]
        table = run_missing_values(result, fields)
    if table.empty:
        return ""
    sources = [c.removeprefix("filled_from_") for c in table.columns if c.startswith("filled_from_")]
    head = ("<tr><th>field</th><th>best single source</th><th>missing with it alone</th>"
            "<th>missing after merging</th><th>gaps filled</th><th>filled from</th></tr>")
    body = []
    for row in table.to_dict("records"):
        by = ", ".join(f"{html.escape(s)} {row['filled_from_' + s]}" for s in sources if row["filled_from_" + s])
        if row["filled_by_rule"]:
            by = (by + ", " if by else "") + f"the rule (no source had a value) {row['filled_by_rule']}"
        body.append(f"<tr><td>{html.escape(str(row['field']))}</td><td>{html.escape(str(row['best_source']))}</td>"
                    f"<td class='n'>{row['missing_best_source']:.1%}</td><td class='n'>{row['missing_merged']:.1%}"
                    f"</td><td class='n'>{row['gaps_filled']}</td><td>{by or '—'}</td></tr>")
    return ("<h2>Missing values before and after merging</h2>"
            "<p>Per field, the share of entities without a value if only the best single export were used "
            "(an entity that export does not hold counts as missing), and after merging all sources; how many "
            "of those gaps merging filled, and from which sources. The same figures are in "
            "<code>missing.csv</code>.</p>"
            f"<table><thead>{head}</thead><tbody>{''.join(body)}</tbody></table>")
