"""Incremental runs: next month's exports matched against what the last run left behind.

Every run leaves, in a hidden ``.carry`` folder of its run folder, what the next run needs to
skip work on records that did not change:

- ``prepared.parquet``: each record's standard values (standardise's output), its key, a hash
  of everything standardising reads, and whether it stood for its identical copies;
- ``grades.parquet``: the agreement grades of every compared candidate pair, by record position;
- ``model.json``: the scoring model (m/u probabilities per class, class shares).

An incremental run (``integrate run --incremental``) reads every export as usual (they are full
exports), then:

- standardises only records that are new or whose content changed; the rest keep their stored
  standard values;
- blocks all records (blocking decisions such as splitting a large block depend on all of
  them), and compares only the candidate pairs it has no stored grades for;
- scores every pair with the last run's model, unless asked to re-estimate it or the share of
  new and changed records passes ``REFIT_SHARE``;
- clusters and resolves as a full run does, so entity IDs follow the same rules.

A stored grade is reused only where the full comparison would give the same grade: both records
unchanged, and the one way a pair's grade depends on other records (whether each name is a name
in use, ``compare.established`` / ``compare.rare_words``) answers as it did last time. So with
the model held fixed an incremental run gives the crosswalk a full run gives (tested).
"""

from __future__ import annotations

import hashlib
import json
import logging
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .cluster import record_keys
from .columns import RECORD_DATE, SOURCE, TRUST
from .compare import established, rare_words
from .mapping.apply import MappedSource
from .mapping.spec import CanonicalSchema
from .score import FieldModel, ScoreModel
from .standardise import FIRST_WORD, standardise

log = logging.getLogger(__name__)

CARRY = ".carry"  # hidden: not part of the published set, not linked from the output folder
CARRY_VERSION = 1  # bump when what is stored (or how standard values are made) changes
REFIT_SHARE = 0.2  # re-estimate the model when more than this share of records is new or changed
_KEY = "__key"
_HASH = "__content"
_STOOD = "__stood_for_copies"
_ENTITY = "__entity"
SAME_SOURCE = ("data", "mapping", "rates")  # what must be unchanged for a source not to be read again


def source_states(data_hashes: dict[str, str | None], mapping_hashes: dict[str, str], rates_hash: str | None,
                  entries: list, display: object) -> dict[str, dict[str, object]]:
    """Per source: the hashes of its data file and mapping file and of the rates table now (a
    source read from a database URL has no file hash and is always read)."""
    out: dict[str, dict[str, object]] = {}
    for entry, shown in entries:
        out[entry.mapping.source] = {"data": data_hashes.get(shown) if shown else None,
                                     "mapping": mapping_hashes.get(display(entry.mapping_file)),  # type: ignore[operator]
                                     "rates": rates_hash}
    return out


def content_hashes(records: pd.DataFrame, canonical: CanonicalSchema) -> np.ndarray:
    """A hash per record of everything its standard values and its part in merged values depend
    on: canonical fields, source (phone regions), trust rank and record date."""
    columns = [SOURCE, *[c for c in (TRUST, RECORD_DATE) if c in records], *canonical.fields]
    text = records[columns].astype("string").fillna("\x00")
    return pd.util.hash_pandas_object(text, index=False).to_numpy(np.uint64)


def settings_fingerprint(canonical_hash: str, regions: dict[str, str | None]) -> str:
    """What makes stored standard values and grades valid: the schema file and phone regions."""
    text = json.dumps({"schema": canonical_hash, "regions": regions, "version": CARRY_VERSION}, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


# ---- the model as JSON ----------------------------------------------------------------------

def model_to_json(model: ScoreModel) -> str:
    return json.dumps({
        "fields": {n: {"type": f.type, "m": f.m, "u": f.u, "u_random": f.u_random, "related": f.related}
                   for n, f in model.fields.items()},
        "prior": model.prior, "iterations": model.iterations, "converged": model.converged,
        "class_shares": model.class_shares, "strata": {str(k): v for k, v in model.strata.items()},
        "theta": {k: {f: np.asarray(v, float).tolist() for f, v in t.items()} for k, t in model._theta.items()},
    })


def model_from_json(text: str) -> ScoreModel:
    d = json.loads(text)
    fields = {n: FieldModel(n, f["type"], f["m"], f["u"], f["u_random"], f["related"]) for n, f in d["fields"].items()}
    theta = {k: {f: np.asarray(v, float) for f, v in t.items()} for k, t in d["theta"].items()}
    return ScoreModel(fields, float(d["prior"]), int(d["iterations"]), bool(d["converged"]),
                      {k: float(v) for k, v in d["class_shares"].items()}, [], _theta=theta,
                      strata={int(k): float(v) for k, v in d.get("strata", {}).items()})


# ---- what a run leaves -------------------------------------------------------------------------

def carry_tables(records: pd.DataFrame, prepared: pd.DataFrame, pairs: pd.DataFrame, copy_of: np.ndarray | None,
                 canonical: CanonicalSchema, entity_ids: object = None
                 ) -> dict[str, tuple[pd.DataFrame, tuple[str, ...]]]:
    """The tables a run leaves for the next incremental run (``write_tables`` shape)."""
    stored = prepared.copy(deep=False)
    if entity_ids is not None:
        stored[_ENTITY] = np.asarray(entity_ids, dtype=object)
    stored[_KEY] = record_keys(records)
    stored[_HASH] = content_hashes(records, canonical)
    stored[_STOOD] = (np.arange(len(records)) if copy_of is None else copy_of) == np.arange(len(records))
    grades = pd.DataFrame({"i": pairs["i"].to_numpy(np.int64), "j": pairs["j"].to_numpy(np.int64)})
    for column in pairs.columns:
        if column.startswith("g_"):
            grades[column] = pairs[column].to_numpy(np.int8)
    return {"prepared": (stored, ("parquet",)), "grades": (grades, ("parquet",))}


def write_carry(run_folder: Path, records: pd.DataFrame, prepared: pd.DataFrame, pairs: pd.DataFrame,
                copy_of: np.ndarray | None, model: ScoreModel, canonical: CanonicalSchema, fingerprint: str,
                entity_ids: object, sources: dict[str, dict[str, object]] | None = None,
                failures: pd.DataFrame | None = None) -> None:
    """Write the ``.carry`` folder. ``sources``: per source, what makes its mapped records valid
    (data file and mapping hashes, rates hash), its unmapped columns and its columns' types (see
    ``source_states``); with ``failures``, an unchanged export need not be read again."""
    from .outputs.tables import write_tables, write_text_atomic

    folder = run_folder / CARRY
    tables = carry_tables(records, prepared, pairs, copy_of, canonical, entity_ids)
    if failures is not None:
        tables["failures"] = (failures.astype({c: "string" for c in failures.columns}), ("parquet",))
    write_tables(folder, tables)
    write_text_atomic(folder / "model.json", model_to_json(model))
    write_text_atomic(folder / "settings.json", json.dumps({"fingerprint": fingerprint, "sources": sources or {}}))


@dataclass
class Carried:
    """What the last run left, read back."""

    run_id: int
    prepared: pd.DataFrame  # standard values + key, content hash, stood-for-copies flag, entity (last run's order)
    grades: pd.DataFrame  # i, j (last run's positions), g_<field>
    model: ScoreModel
    run_folder: Path | None = None  # its merged table and provenance
    sources: dict[str, dict] | None = None  # per source: hashes, unmapped columns, column types
    _records: pd.DataFrame | None = None
    _failures: pd.DataFrame | None = None

    def after_matching(self) -> None:
        """Let go of what only reading and matching needed (memory): keep each record's entity."""
        self.prepared = self.prepared[[_ENTITY]] if _ENTITY in self.prepared else self.prepared.iloc[:, :0]
        self.grades = self.grades.iloc[:0]
        self._records = self._failures = None

    def mapped_source(self, name: str, state: dict[str, object]) -> MappedSource | None:
        """The last run's mapped records of a source whose export, mapping and rates are as
        they were (``state``: from ``source_states`` now), or None when it must be read."""
        before = (self.sources or {}).get(name)
        if before is None or self.run_folder is None or state.get("data") is None or \
                any(before.get(k) != state.get(k) for k in SAME_SOURCE) or "columns" not in before:
            return None
        failures_file = self.run_folder / CARRY / "failures.parquet"
        if not failures_file.exists():
            return None
        if self._records is None:
            self._records = pd.read_parquet(self.run_folder / "records.parquet")
            self._failures = pd.read_parquet(failures_file)
        columns: dict[str, str] = before["columns"]
        frame = self._records[self._records[SOURCE].astype(str) == name]
        frame = frame[list(columns)].reset_index(drop=True)
        for column, dtype in columns.items():
            if dtype == "object":  # text kept as Python strings, missing as None
                frame[column] = frame[column].astype(object).where(frame[column].notna(), None)
            else:
                frame[column] = frame[column].astype(dtype)
        failures = self._failures[self._failures["source"].astype(str) == name].reset_index(drop=True)
        return MappedSource(name, frame, failures.astype(object), list(before.get("unmapped", [])))


def read_carry(run_folder: str | Path | None, run_id: int, fingerprint: str) -> tuple[Carried | None, str]:
    """The last run's carried state, or None and why it cannot be used."""
    if not run_folder:
        return None, "the last run left no run folder"
    folder = Path(run_folder) / CARRY
    if not (folder / "model.json").exists():
        return None, f"run {run_id} left nothing to build on (made before incremental runs, or not written)"
    settings = json.loads((folder / "settings.json").read_text(encoding="utf-8"))
    if settings.get("fingerprint") != fingerprint:
        return None, f"the schema or phone regions changed since run {run_id}"
    return Carried(run_id, pd.read_parquet(folder / "prepared.parquet"), pd.read_parquet(folder / "grades.parquet"),
                   model_from_json((folder / "model.json").read_text(encoding="utf-8")), Path(run_folder),
                   settings.get("sources", {})), ""


# ---- this run against it -----------------------------------------------------------------------

@dataclass
class Plan:
    """Which of this run's records the last run already knew, unchanged."""

    previous_of: np.ndarray  # per current record: its position in the last run, -1 if new or changed
    new: int
    changed: int
    removed: int

    @property
    def unchanged(self) -> int:
        return int((self.previous_of >= 0).sum())

    def share_new(self) -> float:
        return (self.new + self.changed) / max(len(self.previous_of), 1)


def plan(records: pd.DataFrame, canonical: CanonicalSchema, carried: Carried) -> Plan:
    keys = pd.Index(record_keys(records))
    before = pd.Index(carried.prepared[_KEY].astype(str))
    at = before.get_indexer(keys)
    same = np.zeros(len(records), bool)
    known = at >= 0
    same[known] = carried.prepared[_HASH].to_numpy(np.uint64)[at[known]] == content_hashes(records, canonical)[known]
    previous_of = np.where(same, at, -1)
    kept = np.zeros(len(before), bool)
    kept[at[known]] = True
    return Plan(previous_of, new=int((~known).sum()), changed=int((known & ~same).sum()),
                removed=int((~kept).sum()))


def prepared_for(records: pd.DataFrame, canonical: CanonicalSchema, regions: dict[str, str | None] | None,
                 carried: Carried, the_plan: Plan) -> pd.DataFrame:
    """Standard values of every record: stored ones for unchanged records, fresh ones for the rest."""
    fresh = np.flatnonzero(the_plan.previous_of < 0)
    made = standardise(records.iloc[fresh], canonical, regions)
    columns = list(made.columns)
    old = np.flatnonzero(the_plan.previous_of >= 0)
    kept = carried.prepared[columns].iloc[the_plan.previous_of[old]]
    kept.index = records.index[old]
    out = pd.concat([kept, made]) if len(made) else kept
    out = out.loc[records.index] if len(fresh) and len(old) else out
    for c in columns:  # keep standardise's own column types (an all-missing part may differ)
        if out[c].dtype != made[c].dtype and len(made):
            out[c] = out[c].astype(made[c].dtype)
    return out


@dataclass
class Reuse:
    """Stored grades this run can take instead of comparing, keyed by the positions blocking uses
    (this run's records that stand for their copies, 0..n-1)."""

    codes: np.ndarray  # sorted lo * n + hi of current full positions
    grades: np.ndarray  # rows aligned with codes, columns = fields
    fields: list[str]
    n: int
    stored: int  # pairs the last run compared
    dropped: int  # stored pairs not reusable (a record changed or left, or a name's standing changed)
    reused: int = 0  # filled in by the comparison that used it
    compared: int = 0

    def split(self, i: np.ndarray, j: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """For candidate pairs (i, j): which have stored grades, and those grades (rows of found pairs)."""
        lo, hi = np.minimum(i, j).astype(np.int64), np.maximum(i, j).astype(np.int64)
        code = lo * self.n + hi
        at = np.searchsorted(self.codes, code)
        at_ok = np.minimum(at, max(len(self.codes) - 1, 0))
        found = (at < len(self.codes)) & (self.codes[at_ok] == code) if len(self.codes) else np.zeros(len(code), bool)
        return found, self.grades[at_ok[found]]


def _name_standing_changed(carried: Carried, prepared: pd.DataFrame, stood: np.ndarray,
                           canonical: CanonicalSchema, pi: np.ndarray, pj: np.ndarray) -> np.ndarray:
    """Per stored pair (last run's positions): whether a name-in-use answer differs now.

    Comparison counts each name over the records that are matched (those standing for their
    copies); ``stood`` marks them among this run's records.
    """
    changed = np.zeros(len(pi), bool)
    old_stood = carried.prepared[_STOOD].to_numpy(bool)
    for name, spec in canonical.fields.items():
        if not (spec.is_compared() and spec.type == "person_name"):
            continue
        for column, test in ((name, "pair"), (name + FIRST_WORD, "word")):
            if column not in prepared or column not in carried.prepared:
                continue
            before_values = carried.prepared[column]
            codes, uniques = pd.factorize(pd.concat([before_values, prepared[column]], ignore_index=True))
            old_codes, new_codes = codes[:len(before_values)], codes[len(before_values):]
            size = len(uniques) + 1  # the last entry: missing (-1)
            old_counts = np.append(np.bincount(old_codes[old_stood & (old_codes >= 0)], minlength=len(uniques)), 0)
            new_counts = np.append(np.bincount(new_codes[stood & (new_codes >= 0)], minlength=len(uniques)), 0)
            a, b = old_codes[pi], old_codes[pj]
            a, b = np.where(a < 0, size - 1, a), np.where(b < 0, size - 1, b)
            if test == "pair":
                changed |= established(old_counts[a], old_counts[b]) != established(new_counts[a], new_counts[b])
            else:
                flipped = rare_words(old_counts) != rare_words(new_counts)
                changed |= flipped[a] | flipped[b]
    return changed


def reuse_for(carried: Carried, the_plan: Plan, prepared: pd.DataFrame, copy_of: np.ndarray,
              canonical: CanonicalSchema) -> Reuse:
    """The stored grades still valid for this run's records (``copy_of``: identical grouping)."""
    n = len(the_plan.previous_of)
    current_of = np.full(len(carried.prepared), -1, np.int64)
    old = np.flatnonzero(the_plan.previous_of >= 0)
    current_of[the_plan.previous_of[old]] = old
    g = carried.grades
    pi, pj = g["i"].to_numpy(np.int64), g["j"].to_numpy(np.int64)
    ci, cj = current_of[pi], current_of[pj]
    ok = (ci >= 0) & (cj >= 0)
    stood = copy_of == np.arange(n)
    ok[ok] &= ~_name_standing_changed(carried, prepared, stood, canonical, pi[ok], pj[ok])
    # blocking numbers the records that stand for their copies 0..m-1 (identical.py)
    positions = np.flatnonzero(stood)
    matched_as = np.full(n, -1, np.int64)
    matched_as[positions] = np.arange(len(positions))
    ri, rj = matched_as[np.where(ok, ci, 0)], matched_as[np.where(ok, cj, 0)]
    ok &= (ri >= 0) & (rj >= 0)
    fields = [c for c in g.columns if c.startswith("g_")]
    lo, hi = np.minimum(ri[ok], rj[ok]), np.maximum(ri[ok], rj[ok])
    m = len(positions)
    codes = lo * m + hi
    order = np.argsort(codes, kind="stable")
    return Reuse(codes[order], g[fields].to_numpy(np.int8)[ok][order], [f[2:] for f in fields], m,
                 stored=len(g), dropped=int((~ok).sum()))


def settled(carried: Carried, the_plan: Plan, entity_ids: object) -> np.ndarray:
    """Per current record: whether its entity is exactly as the last run left it (the same ID,
    the same members, none of them changed), so its merged row and provenance stand."""
    current = np.asarray(entity_ids, dtype=object)
    before = carried.prepared[_ENTITY].to_numpy(object)
    same = the_plan.previous_of >= 0
    same[same] = before[the_plan.previous_of[same]] == current[same]
    codes, names = pd.factorize(pd.Series(current, dtype=object))
    members = np.bincount(codes, minlength=len(names))
    kept = np.bincount(codes, weights=same.astype(float), minlength=len(names))
    had = pd.Series(before).value_counts().reindex(pd.Index(names)).fillna(0).to_numpy()
    whole = (kept == members) & (had == members)
    return whole[codes]


def resolve_changed(records: pd.DataFrame, entity_ids: pd.Series, canonical: CanonicalSchema, prepared: pd.DataFrame,
                    carried: Carried, stands: np.ndarray) -> tuple[pd.DataFrame, pd.DataFrame, int]:
    """``resolve`` for entities that changed; the last run's merged rows and provenance for the
    rest (``stands``: per record, from ``settled``). Returns merged, provenance, entities resolved."""
    from .resolve import resolve

    todo = ~stands
    if not todo.any():  # resolve one entity anyway: its result carries the table's column types
        todo = np.asarray(entity_ids) == np.asarray(entity_ids)[0]
    rows = np.flatnonzero(todo)
    merged, provenance = resolve(records.iloc[rows].reset_index(drop=True),
                                 pd.Series(np.asarray(entity_ids, dtype=object)[rows]), canonical,
                                 prepared.iloc[rows].reset_index(drop=True))
    folder = carried.run_folder
    kept_ids = pd.Index(np.asarray(entity_ids, dtype=object)[~todo]).unique()
    old_merged = pd.read_parquet(folder / "merged.parquet")
    old_merged = old_merged[old_merged["entity_id"].isin(kept_ids)]
    old_prov = pd.read_parquet(folder / "provenance.parquet")
    old_prov = old_prov[old_prov["entity_id"].isin(kept_ids)]
    out_merged = _joined(merged, old_merged).sort_values("entity_id", kind="mergesort").reset_index(drop=True)
    out_merged.attrs = merged.attrs
    rank = {name: k for k, name in enumerate(canonical.fields)}
    out_prov = _joined(provenance, old_prov)
    order = np.lexsort((out_prov["entity_id"].to_numpy(str), out_prov["field"].map(rank).to_numpy()))
    return out_merged, out_prov.iloc[order].reset_index(drop=True), len(merged)


def _joined(fresh: pd.DataFrame, stored: pd.DataFrame) -> pd.DataFrame:
    """Fresh rows and stored ones (read back from Parquet) in the fresh rows' column types."""
    stored = stored[list(fresh.columns)].astype(fresh.dtypes.to_dict())
    return pd.concat([fresh, stored], ignore_index=True)


@dataclass
class IncrementalSummary:
    """What an incremental run reused, for the report and the command line."""

    built_on: int  # the run it started from
    unchanged: int
    new: int
    changed: int
    removed: int
    pairs_reused: int = 0
    pairs_compared: int = 0
    stored_pairs_dropped: int = 0
    entities_resolved: int = 0  # entities whose merged row was made again (the rest kept theirs)
    entities_kept: int = 0
    sources_not_read: list[str] = field(default_factory=list)  # exports unchanged since the last run
    model: str = "kept"  # 'kept' (the last run's) or 're-estimated' (asked, or many new records)

    def text(self) -> str:
        return (f"incremental run on run {self.built_on}: {self.unchanged:,} records unchanged, {self.new:,} new, "
                f"{self.changed:,} changed, {self.removed:,} removed; {self.pairs_reused:,} candidate pairs' grades "
                f"reused, {self.pairs_compared:,} compared; {self.entities_resolved:,} entities resolved again, "
                f"{self.entities_kept:,} kept; model {self.model}"
                + (f"; not read again (unchanged): {', '.join(self.sources_not_read)}" if self.sources_not_read
                   else ""))
