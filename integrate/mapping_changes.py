"""What changed in the mapping files between two runs, and what that did to the records and entities.

Both runs' mapping texts come from the state database (``history_store``); the effect compares
their crosswalks: a record *read differently* has the same source and record ID in both runs
but another hash of its canonical values, and an entity *changed* when its set of records
differs between the runs or one of its records was read differently.

Example:
    >>> a = pd.DataFrame({"source": ["s", "s"], "record_id": ["1", "2"], "entity_id": ["E1", "E1"],
    ...                   "record_hash": ["x", "y"]})
    >>> b = a.assign(record_hash=["x", "z"])
    >>> effect = crosswalk_effect(a, b)
    >>> effect.records_read_differently, effect.entities_changed
    (1, 1)
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from .history_store import mapping_texts, mapping_versions

KEY = ["source", "record_id"]


@dataclass(frozen=True)
class FileChange:
    """One mapping file that differs between two runs (added, removed or edited)."""

    path: str
    old_sha256: str | None
    new_sha256: str | None
    diff: str | None  # unified diff; None when a version's text was not recorded

    @property
    def status(self) -> str:
        return "added" if self.old_sha256 is None else "removed" if self.new_sha256 is None else "changed"


@dataclass(frozen=True)
class Effect:
    """How two runs' crosswalks differ."""

    records_compared: int  # records present in both runs
    records_read_differently: int
    records_added: int
    records_removed: int
    entities_changed: int


@dataclass
class MappingComparison:
    run_a: int
    run_b: int
    files: list[FileChange] = field(default_factory=list)
    effect: Effect | None = None


def unified_diff(old: str, new: str, path: str, label_a: str, label_b: str) -> str:
    return "".join(difflib.unified_diff(old.splitlines(keepends=True), new.splitlines(keepends=True),
                                        fromfile=f"{path} ({label_a})", tofile=f"{path} ({label_b})"))


def file_changes(old: dict[str, tuple[str, str | None]], new: dict[str, tuple[str, str | None]],
                 label_a: str, label_b: str) -> list[FileChange]:
    """Per path, (sha256, text) in two runs -> the files that differ, with their diffs."""
    out = []
    for path in sorted(set(old) | set(new)):
        (sha_a, text_a), (sha_b, text_b) = old.get(path, (None, "")), new.get(path, (None, ""))
        if sha_a == sha_b:
            continue
        diff = unified_diff(text_a or "", text_b or "", path, label_a, label_b) \
            if (text_a is not None and text_b is not None) else None
        out.append(FileChange(path, sha_a, sha_b, diff))
    return out


def crosswalk_effect(before: pd.DataFrame, after: pd.DataFrame) -> Effect:
    """Records read differently and entities changed between two crosswalks (see the module docstring)."""
    a = before[KEY + ["entity_id", "record_hash"]].astype(str)
    b = after[KEY + ["entity_id", "record_hash"]].astype(str)
    both = a.merge(b, on=KEY, suffixes=("_a", "_b"))
    reread = both[both["record_hash_a"] != both["record_hash_b"]]

    def members(frame: pd.DataFrame) -> pd.Series:
        keys = frame["source"] + "\x1f" + frame["record_id"]
        return keys.groupby(frame["entity_id"]).agg(frozenset)

    ma, mb = members(a), members(b)
    ids = ma.index.union(mb.index)
    ma, mb = ma.reindex(ids), mb.reindex(ids)
    moved = {e for e, x, y in zip(ids, ma, mb) if not (isinstance(x, frozenset) and x == y)}
    changed = moved | set(reread["entity_id_b"]) | set(reread["entity_id_a"])
    return Effect(len(both), len(reread), len(b) - len(both), len(a) - len(both), len(changed))


def _run_files(root: Path, run_id: int) -> dict[str, tuple[str, str | None]]:
    versions = mapping_versions(root)
    texts = mapping_texts(root, run_id)
    rows = versions[versions["run_id"] == run_id]
    return {r.path: (r.sha256, texts.get(r.path)) for r in rows.itertuples(index=False)}


def compare_runs(root: str | Path, run_a: int, run_b: int) -> MappingComparison:
    """The mapping files that differ between two stored runs and how the crosswalk changed with them.

    Raises:
        InputError: a run number not in the state store (``unknown_run``).
    """
    from .errors import InputError
    from .state import StateStore

    root = Path(root)
    store = StateStore.existing(root)
    for run_id in (run_a, run_b):
        if store is None or store.run(run_id) is None:
            known = ", ".join(str(r.run_id) for r in store.runs()) if store is not None else "none yet"
            raise InputError(f"no run {run_id} in the state store", reason="unknown_run",
                             hint=f"stored runs: {known} (integrate mappings history)")
    assert store is not None
    out = MappingComparison(run_a, run_b)
    out.files = file_changes(_run_files(root, run_a), _run_files(root, run_b), f"run {run_a}", f"run {run_b}")
    out.effect = crosswalk_effect(store.crosswalk(run_a), store.crosswalk(run_b))
    return out


def history_rows(root: str | Path, file: str | None = None) -> pd.DataFrame:
    """One row per version of each mapping file: path, version, sha256, runs, first and last date."""
    versions = mapping_versions(Path(root))
    if file is not None:
        wanted = versions["path"].map(lambda p: file in (p, Path(p).name, Path(p).stem))
        versions = versions[wanted]
    rows = []
    for path, group in versions.groupby("path", sort=True):
        # a version is a run of consecutive runs with the same hash (a file edited back is a new version)
        starts = group["sha256"].ne(group["sha256"].shift())
        for number, (_, part) in enumerate(group.groupby(starts.cumsum(), sort=True), start=1):
            rows.append({"path": path, "version": number, "sha256": part["sha256"].iloc[0],
                         "runs": part["run_id"].astype(int).tolist(), "first": part["started_at"].iloc[0],
                         "last": part["started_at"].iloc[-1], "text_stored": bool(part["has_text"].iloc[0])})
    return pd.DataFrame(rows, columns=["path", "version", "sha256", "runs", "first", "last", "text_stored"])
