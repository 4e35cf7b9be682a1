"""A workspace's current outputs, loaded once per output set and indexed for fast look-ups.

Where the current outputs are is asked of the same function ``integrate show`` uses
(``output_folder``: the last recorded run's folder, else the schema's); the set is reloaded when
that folder or its crosswalk changes, so a finished run is seen by the next request. An entity's
story holds the same frames as ``integrate show`` builds (``entity_story``); a test checks that.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..commands.show import output_folder
from ..errors import InputError

TABLES = ("merged", "crosswalk", "provenance", "clusters", "pairs", "records", "changes", "splits", "failures")


def current_output_folder(root: Path) -> Path:
    return output_folder(root, None)


def plain(value: Any) -> Any:
    """A value fit for JSON (NaN and NA become null, numpy scalars become Python ones)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, float | np.floating):
        return None if np.isnan(value) else float(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, pd.Timestamp | np.datetime64):
        return str(value)
    return value if isinstance(value, str | int | bool) else str(value)


def rows(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """A frame as JSON-ready dicts, column by column (missing values become None)."""
    if frame.empty:
        return []
    out = frame.copy()
    out.columns = [str(c) for c in out.columns]
    for column in out.columns:
        values = out[column]
        if not (pd.api.types.is_numeric_dtype(values) or pd.api.types.is_bool_dtype(values)
                or pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values)):
            out[column] = values.astype("string")  # dates and other types as their text
    out = out.astype(object).where(out.notna(), None)
    names = list(out.columns)
    records = [dict(zip(names, values)) for values in zip(*(out[c].tolist() for c in names))]
    odd = [c for c in out.columns if pd.api.types.is_object_dtype(frame[c] if c in frame else out[c])]
    if odd:  # object columns may hold numpy scalars or other objects: made plain one value at a time
        for r in records:
            for c in odd:
                r[c] = plain(r[c])
    return records


def _grouped(records: list[dict[str, Any]], key: str) -> dict[str, list[dict[str, Any]]]:
    out: dict[str, list[dict[str, Any]]] = {}
    for row in records:
        out.setdefault(str(row[key]), []).append(row)
    return out


@dataclass
class OutputSet:
    """One output set, turned once into plain rows grouped by entity (a look-up is then a few dict reads)."""

    folder: Path
    stamp: tuple[str, int]
    columns: list[str]  # of the merged table
    merged: dict[str, dict[str, Any]]  # entity -> merged row
    members: dict[str, list[dict[str, Any]]]  # entity -> crosswalk rows joined with the canonical records
    provenance: dict[str, list[dict[str, Any]]]
    clusters: dict[str, dict[str, Any]]
    entity_of: dict[tuple[str, str], dict[str, Any]]  # (source, record_id) -> crosswalk row
    merged_frame: pd.DataFrame
    answers: dict[tuple[str, ...], bytes] = field(default_factory=dict)  # JSON answers made once per output set

    @classmethod
    def load(cls, folder: Path, stamp: tuple[str, int]) -> OutputSet:
        def read(name: str) -> pd.DataFrame:
            path = folder / f"{name}.parquet"
            if not path.exists():
                raise InputError(f"no {name}.parquet in the output folder", file=str(folder), reason="no_outputs",
                                 hint="start a run first (POST .../runs)")
            return pd.read_parquet(path)

        merged = read("merged")
        crosswalk = read("crosswalk").astype({"source": str, "record_id": str, "entity_id": str})
        provenance = read("provenance")
        records = read("records").astype({"_source": str, "_record_id": str})
        clusters = read("clusters") if (folder / "clusters.parquet").exists() else pd.DataFrame(columns=["entity_id"])
        # members as `integrate show` joins them: crosswalk rows with their canonical records
        members = crosswalk.merge(records, left_on=["source", "record_id"], right_on=["_source", "_record_id"],
                                  how="left").sort_values(["entity_id", "source", "record_id"], kind="mergesort")
        crosswalk_rows = rows(crosswalk)
        return cls(folder, stamp, [str(c) for c in merged.columns],
                   {str(r["entity_id"]): r for r in rows(merged)}, _grouped(rows(members), "entity_id"),
                   _grouped(rows(provenance), "entity_id"),
                   {str(r["entity_id"]): r for r in rows(clusters)},
                   {(r["source"], r["record_id"]): r for r in crosswalk_rows}, merged)

    def story(self, entity_id: str) -> dict[str, Any] | None:
        """Merged row, member records, provenance and cluster figures (the content of ``entity_story``)."""
        if entity_id not in self.merged:
            return None
        return {"merged": self.merged[entity_id], "members": self.members.get(entity_id, []),
                "provenance": self.provenance.get(entity_id, []), "cluster": self.clusters.get(entity_id)}

    def entity_of_record(self, source: str, record_id: str) -> dict[str, Any] | None:
        return self.entity_of.get((source, record_id))

    def search(self, field: str, value: str, mode: str, limit: int) -> list[dict[str, Any]]:
        """Merged rows whose ``field`` equals (or starts with) ``value``, case and spaces ignored."""
        if field not in self.columns or field == "entity_id":
            raise InputError(f"no field '{field}' in the merged table", value=field, reason="unknown_field",
                             hint="fields: " + ", ".join(c for c in self.columns if c != "entity_id"))
        column = self.merged_frame[field].astype("string").str.strip().str.casefold()
        wanted = value.strip().casefold()
        hit = column.str.startswith(wanted) if mode == "prefix" else column == wanted
        return rows(self.merged_frame[hit.fillna(False).to_numpy()].head(limit))


class ResultsCache:
    """The current output set of one workspace, reloaded when a new run has published one.

    Where the outputs are is asked again at most every ``RECHECK`` seconds, so a finished run is
    seen that soon, and a burst of look-ups asks once.
    """

    RECHECK = 0.5

    def __init__(self, root: Path) -> None:
        self.root = root
        self._lock = threading.Lock()
        self._current: OutputSet | None = None
        self._checked: tuple[float, Path, tuple[str, int]] | None = None

    def stamp(self) -> tuple[Path, tuple[str, int]]:
        checked = self._checked
        now = time.monotonic()
        if checked is not None and now - checked[0] < self.RECHECK:
            return checked[1], checked[2]
        folder, stamp = self._stamp()
        self._checked = (now, folder, stamp)
        return folder, stamp

    def _stamp(self) -> tuple[Path, tuple[str, int]]:
        folder = current_output_folder(self.root)
        marker = folder / "crosswalk.parquet"
        try:
            return folder, (str(folder.resolve()), marker.stat().st_mtime_ns)
        except OSError:
            return folder, (str(folder), -1)

    def known_stamp(self) -> tuple[str, int] | None:
        """The current output set's stamp when it was checked less than ``RECHECK`` seconds ago, else None."""
        checked = self._checked
        if checked is None or time.monotonic() - checked[0] >= self.RECHECK:
            return None
        return checked[2]

    def fresh(self) -> OutputSet | None:
        """The loaded set when it is known to be current without asking anything (cheap: for the event loop)."""
        stamp, current = self.known_stamp(), self._current
        return current if stamp is not None and current is not None and current.stamp == stamp else None

    def get(self) -> OutputSet:
        folder, stamp = self.stamp()
        current = self._current
        if current is not None and current.stamp == stamp:
            return current
        with self._lock:
            if self._current is None or self._current.stamp != stamp:
                self._current = OutputSet.load(folder, stamp)
            return self._current
