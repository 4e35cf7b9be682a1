"""Entity IDs that stay stable from run to run, and what changed since the previous run.

A run's clusters are matched to the previous run's entities by the records they share:

- every (new cluster, old entity) pair that shares records is a candidate; candidates are taken
  greedily, most shared records first (ties: the old entity ID, then the new cluster's smallest
  record key, both in text order), and a candidate whose cluster or entity is already taken is
  skipped. So each new cluster gets the ID of the previous entity with which it shares most
  records, and an old ID goes to at most one cluster;
- a cluster left without an ID gets a new one, made from its smallest record key (``E`` + 10 hex
  digits of SHA-1); an ID ever issued before is never issued again (a counter is added to the
  key until the ID is free).

What changed, against the previous run (the change summary):

- ``records_added`` / ``records_removed``: record keys only in this run / only in the previous one;
  ``records_moved``: records in both runs whose entity ID changed;
- each new cluster is ``created`` (shares no record with the previous run), ``merged`` (takes
  records from two or more previous entities), ``unchanged`` (one previous entity, the same
  records, so the same ID), ``changed`` (one previous entity that it alone continues, with records
  added or removed; same ID), or a ``split_part`` (one previous entity that was split);
- each previous entity whose shared records went to two or more clusters was ``split``; one
  whose records all left the sources is ``retired``.

Nothing here depends on the order of rows: everything is keyed by (source, record ID).
"""

from __future__ import annotations

import hashlib
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from .columns import RECORD_ID, SOURCE
from .grouped import join_by_group, smallest_in_group
from .mapping.money import minor_units
from .mapping.spec import CanonicalSchema
from .merged_values import round_half_away

KEY_SEPARATOR = "\x1f"
# related_ids: for a new entity, the previous entities it shares records with; for a split one, its parts
CHANGE_COLUMNS = ["entity_id", "change", "related_ids", "records", "records_added", "records_removed"]


@dataclass(frozen=True)
class ChangeSummary:
    """Counts of what changed since the previous run (all zero but ``created`` on a first run)."""

    previous_run: int | None
    entities: int
    created: int
    merged: int
    split: int
    unchanged: int
    changed: int
    split_parts: int
    retired: int
    ids_kept: int
    ids_minted: int
    records_added: int
    records_removed: int
    records_moved: int
    records_changed: int = 0  # records in both runs whose values differ (set by the pipeline)

    def as_dict(self) -> dict[str, int | None]:
        return asdict(self)


def canonical_order(records: pd.DataFrame) -> pd.DataFrame:
    """Records sorted by source, then record ID in shortlex order (length, then text).

    Every later stage sees records in this order, so nothing can depend on the order of rows in
    the files. Shortlex order sorts unpadded numeric IDs as numbers (9 before 10).
    """
    rid = records[RECORD_ID].astype(str)
    order = pd.DataFrame({"s": records[SOURCE].astype(str).to_numpy(), "n": rid.str.len().to_numpy(),
                          "r": rid.to_numpy()}).sort_values(["s", "n", "r"], kind="mergesort").index
    return records.iloc[order.to_numpy()].reset_index(drop=True)


def mint_id(key: str, taken: set[str]) -> str:
    """A new entity ID from a record key, avoiding every ID in ``taken``.

    Example:
        >>> first = mint_id("webshop\\x1fW1", set())
        >>> first, mint_id("webshop\\x1fW1", {first}) != first
        ('E6ED0529BB6', True)
    """
    salt = 0
    while True:
        text = key if salt == 0 else f"{key}#{salt}"
        candidate = "E" + hashlib.sha1(text.encode("utf-8")).hexdigest()[:10].upper()
        if candidate not in taken:
            return candidate
        salt += 1


def _keys(source: pd.Series, record_id: pd.Series) -> pd.Series:
    return source.astype(str) + KEY_SEPARATOR + record_id.astype(str)


def assign_stable_ids(current: pd.DataFrame, previous: pd.DataFrame | None, issued: set[str] | None = None,
                      previous_run: int | None = None) -> tuple[pd.Series, ChangeSummary, pd.DataFrame]:
    """Entity IDs for this run's clusters, kept from the previous run where the records say so.

    Args:
        current: one row per record: ``source``, ``record_id``, ``cluster`` (any label that
            groups the records of one cluster, e.g. the cluster's own ID) and optionally
            ``record_hash`` (see ``record_hashes``) to count records whose values changed.
        previous: the previous run's crosswalk (``source``, ``record_id``, ``entity_id``, optionally
            ``record_hash``), or None.
        issued: every entity ID issued by earlier runs (never issued again for another entity).
        previous_run: the previous run's number, for the summary.

    Returns:
        (entity ID per row of ``current``; the change summary; one row per entity that is not
        unchanged, and per retired entity, with ``CHANGE_COLUMNS``)
    """
    taken = set(issued or ())
    cur = pd.DataFrame({"key": _keys(current["source"], current["record_id"]).to_numpy(),
                        "cluster": current["cluster"].astype(str).to_numpy()})
    first_key = _smallest_key(cur)
    if previous is None or previous.empty:
        prev = pd.DataFrame({"key": pd.Series(dtype=object), "entity_id": pd.Series(dtype=object)})
    else:
        prev = pd.DataFrame({"key": _keys(previous["source"], previous["record_id"]).to_numpy(),
                             "entity_id": previous["entity_id"].astype(str).to_numpy()})
    taken |= set(prev["entity_id"])
    shared = cur.merge(prev, on="key", how="inner")
    overlap = shared.groupby(["cluster", "entity_id"]).size().rename("n").reset_index()
    overlap["first_key"] = overlap["cluster"].map(first_key)
    overlap = overlap.sort_values(["n", "entity_id", "first_key"], ascending=[False, True, True], kind="mergesort")
    chosen: dict[str, str] = {}
    used: set[str] = set()
    for cluster, entity in zip(overlap["cluster"].tolist(), overlap["entity_id"].tolist()):
        # greedy assignment over (usually a few thousand) overlapping pairs, best overlap first
        if cluster in chosen or entity in used:
            continue
        chosen[cluster] = entity
        used.add(entity)
    kept = len(chosen)
    for cluster, key in first_key.sort_values(kind="mergesort").items():
        if cluster not in chosen:
            chosen[cluster] = mint_id(key, taken)
            taken.add(chosen[cluster])
    ids = cur["cluster"].map(chosen)
    summary, changes = _changes(cur.assign(entity_id=ids.to_numpy()), prev, overlap, previous_run)
    summary = ChangeSummary(**{**summary.as_dict(), "ids_kept": kept, "ids_minted": len(first_key) - kept,
                               "records_changed": _changed_records(current, previous)})
    return pd.Series(ids.to_numpy(), index=current.index, name="entity_id"), summary, changes


def _smallest_key(cur: pd.DataFrame) -> pd.Series:
    """Each cluster's smallest record key (``groupby(...).min()`` on text, without the per-group calls)."""
    clusters, names = pd.factorize(cur["cluster"], sort=True)
    keys = cur["key"].to_numpy(dtype=object)
    return pd.Series(keys[smallest_in_group(keys, clusters)], index=pd.Index(names, name="cluster"), name="key")


def _changed_records(current: pd.DataFrame, previous: pd.DataFrame | None) -> int:
    """Records in both runs whose values differ (when both sides carry ``record_hash``)."""
    if previous is None or "record_hash" not in current or "record_hash" not in previous:
        return 0
    both = current[["source", "record_id", "record_hash"]].astype(str).merge(
        previous[["source", "record_id", "record_hash"]].astype(str), on=["source", "record_id"])
    return int((both["record_hash_x"] != both["record_hash_y"]).sum())


def _changes(cur: pd.DataFrame, prev: pd.DataFrame, overlap: pd.DataFrame, previous_run: int | None
             ) -> tuple[ChangeSummary, pd.DataFrame]:
    """Classify each new entity and each previous one (definitions in the module docstring)."""
    new_keys, old_keys = set(cur["key"]), set(prev["key"])
    both = cur.merge(prev, on="key", suffixes=("", "_before"))
    moved = int((both["entity_id"] != both["entity_id_before"]).sum())
    size_new = cur.groupby("entity_id").size()
    size_old = prev.groupby("entity_id").size()
    links = overlap.assign(new_id=overlap["cluster"].map(cur.drop_duplicates("cluster").set_index("cluster")[
        "entity_id"]))
    parts = join_by_group(links["new_id"], links["entity_id"], " ", sort_labels=True)
    n_parts = links.groupby("entity_id").size()
    split_old = n_parts[n_parts > 1].index
    per_new = links.groupby("new_id").agg(n_before=("entity_id", "size"), shared=("n", "sum"))
    # the smallest earlier ID per new entity, by one sort (a grouped min of text runs once per group in Python)
    smallest = links.sort_values("entity_id", kind="mergesort").drop_duplicates("new_id")
    per_new["first_before"] = smallest.set_index("new_id")["entity_id"].reindex(per_new.index)
    per_new["before"] = join_by_group(links["entity_id"], links["new_id"], " ", sort_labels=True)
    per_new["old_size"] = links.assign(old=links["entity_id"].map(size_old)).groupby("new_id")["old"].sum()
    table = pd.DataFrame({"records": size_new}).join(per_new)
    table["n_before"] = table["n_before"].fillna(0).astype(int)
    table["shared"] = table["shared"].fillna(0).astype(int)
    table["old_size"] = table["old_size"].fillna(0).astype(int)
    single = table["n_before"] == 1
    from_split = single & table["first_before"].isin(split_old)
    same_records = (table["shared"] == table["records"]) & (table["shared"] == table["old_size"])
    kept_id = table["first_before"] == table.index.to_series()
    table["change"] = np.select(
        [table["n_before"] == 0, table["n_before"] > 1, from_split, single & kept_id & same_records],
        ["created", "merged", "split_part", "unchanged"], "changed")
    table["records_added"] = table["records"] - table["shared"]
    table["records_removed"] = table["old_size"] - table["shared"]
    counts = table["change"].value_counts()
    new_rows = table[table["change"] != "unchanged"].reset_index(names="entity_id").rename(
        columns={"before": "related_ids"})
    old_rows = pd.DataFrame({"entity_id": split_old, "change": "split", "related_ids": parts.reindex(split_old),
                             "records": size_old.reindex(split_old).to_numpy()})
    retired = size_old.index.difference(links["entity_id"])
    gone = pd.DataFrame({"entity_id": retired, "change": "retired", "related_ids": "",
                         "records": size_old.reindex(retired).to_numpy()})
    gone["records_removed"] = gone["records"]
    changes = pd.concat([new_rows, old_rows, gone], ignore_index=True).reindex(columns=CHANGE_COLUMNS)
    changes["related_ids"] = changes["related_ids"].fillna("")
    for column in ("records", "records_added", "records_removed"):
        changes[column] = changes[column].fillna(0).astype(int)
    changes = changes.sort_values(["change", "entity_id"], kind="mergesort").reset_index(drop=True)
    if prev.empty:
        changes = changes.iloc[0:0]  # a first run: every entity is new, listing them all says nothing
    summary = ChangeSummary(
        previous_run=previous_run, entities=len(table), created=int(counts.get("created", 0)),
        merged=int(counts.get("merged", 0)), split=len(split_old), unchanged=int(counts.get("unchanged", 0)),
        changed=int(counts.get("changed", 0)), split_parts=int(counts.get("split_part", 0)), retired=len(retired),
        ids_kept=0, ids_minted=0, records_added=len(new_keys - old_keys), records_removed=len(old_keys - new_keys),
        records_moved=moved,
    )
    return summary, changes


def record_hashes(records: pd.DataFrame, fields: list[str], money_digits: dict[str, int] | None = None
                  ) -> np.ndarray:
    """A 16-hex-digit hash of each record's canonical values (to count records whose values changed).

    ``money_digits`` gives money fields' minor units: converted amounts are kept finer than a cent
    until they are merged, and a difference below the cent is not a changed value.
    """
    # floats to 9 decimals: a unit conversion's last-digit noise (167.38600000000002) is not a changed value
    digits = money_digits or {}

    def rounded(column: pd.Series) -> pd.Series:
        if column.dtype.kind != "f":
            return column
        if column.name in digits:
            return pd.Series(round_half_away(column.to_numpy(), digits[column.name]), index=column.index)
        return column.round(9)

    values = records[fields].apply(rounded)
    values = values.astype("string").fillna("\x00")
    return np.char.mod("%016x", pd.util.hash_pandas_object(values, index=False).to_numpy()).astype(object)


def money_digits(canonical: CanonicalSchema) -> dict[str, int]:
    """The minor units of every money field (``record_hashes`` compares money to the cent)."""
    return {name: minor_units(canonical.base_currency) for name, spec in canonical.fields.items()
            if spec.type == "money"}
