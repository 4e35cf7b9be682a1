"""What changed between any two recorded runs (``integrate changes --since RUN``).

The change summary each run stores compares it with the run just before it. Between two runs
further apart (last month's and today's, with test runs between them) the two crosswalks are
compared here the same way (``ids``: created, merged, split, a part of a split, retired), and an
entity that kept its ID with different records is told apart by direction: ``grew`` (records only
added), ``shrank`` (records only removed) or ``changed`` (both). Each entity's row names the
records that caused the change: those it gained and those it lost, as ``source:record_id``.

Example:
    >>> import pandas as pd
    >>> old = pd.DataFrame({"source": ["a", "a", "b"], "record_id": ["1", "2", "9"], "entity_id": ["E1", "E1", "E2"]})
    >>> new = pd.DataFrame({"source": ["a", "a", "a"], "record_id": ["1", "2", "3"], "entity_id": ["E1", "E1", "E1"]})
    >>> table = changes_between(old, new, old_run=1).set_index("entity_id")
    >>> table.loc["E1", ["change", "records_gained"]].tolist(), table.loc["E2", "change"]
    (['grew', 'a:3'], 'retired')
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .ids import KEY_SEPARATOR, ChangeSummary, _changes, _keys

COLUMNS = ["entity_id", "change", "related_ids", "records", "records_added", "records_removed",
           "records_gained", "records_lost"]
LIST_LIMIT = 20  # record keys listed per entity and direction; the counts give the rest


def _frame(crosswalk: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame({"key": _keys(crosswalk["source"], crosswalk["record_id"]).to_numpy(),
                         "entity_id": crosswalk["entity_id"].astype(str).to_numpy()})


def _listed(keys: pd.Series, groups: pd.Series) -> pd.Series:
    """Per group, its keys as 'source:record_id' joined by spaces (at most LIST_LIMIT, then '...')."""
    if keys.empty:
        return pd.Series(dtype=object)
    shown = pd.DataFrame({"g": groups.to_numpy(), "k": keys.str.replace(KEY_SEPARATOR, ":", regex=False).to_numpy()})
    shown = shown.sort_values(["g", "k"], kind="mergesort")
    rank = shown.groupby("g").cumcount()
    total = shown.groupby("g").size()
    text = shown[rank < LIST_LIMIT].groupby("g")["k"].agg(" ".join)
    more = (total - LIST_LIMIT).clip(lower=0)
    return text.where(more.reindex(text.index) == 0, text + " ... (+" + more.reindex(text.index).astype(str) + ")")


def changes_between(old: pd.DataFrame, new: pd.DataFrame, *, old_run: int | None = None) -> pd.DataFrame:
    """Per entity that is not unchanged between two crosswalks: what changed and which records did it."""
    table, _ = changes_and_summary(old, new, old_run=old_run)
    return table


def changes_and_summary(old: pd.DataFrame, new: pd.DataFrame, *, old_run: int | None = None
                        ) -> tuple[pd.DataFrame, ChangeSummary]:
    """``changes_between`` and the counts (``ChangeSummary``; ``changed`` there counts grew + shrank + changed)."""
    prev, cur = _frame(old), _frame(new)
    cur["cluster"] = cur["entity_id"]
    shared = cur.merge(prev, on="key", suffixes=("", "_old"))
    overlap = shared.groupby(["cluster", "entity_id_old"]).size().rename("n").reset_index().rename(
        columns={"entity_id_old": "entity_id"})
    summary, table = _changes(cur, prev, overlap, old_run)
    kept = len(set(cur["entity_id"]) & set(prev["entity_id"]))
    summary = ChangeSummary(**{**summary.as_dict(), "ids_kept": kept, "ids_minted": summary.entities - kept})
    added, removed = table["records_added"] > 0, table["records_removed"] > 0
    table["change"] = np.where(table["change"].eq("changed") & added & ~removed, "grew",
                               np.where(table["change"].eq("changed") & removed & ~added, "shrank",
                                        table["change"]))
    # the records behind each change: gained = now in the entity, before elsewhere or nowhere;
    # lost = before in the entity, now elsewhere or gone
    before = prev.set_index("key")["entity_id"]
    after = cur.set_index("key")["entity_id"]
    gained = cur[cur["key"].map(before).ne(cur["entity_id"]).to_numpy()]
    lost = prev[prev["key"].map(after).ne(prev["entity_id"]).to_numpy()]
    table["records_gained"] = table["entity_id"].map(_listed(gained["key"], gained["entity_id"])).fillna("")
    table["records_lost"] = table["entity_id"].map(_listed(lost["key"], lost["entity_id"])).fillna("")
    return table.reindex(columns=COLUMNS).reset_index(drop=True), summary
