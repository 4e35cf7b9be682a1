"""A workspace's current outputs, loaded once per output set and indexed for fast look-ups.

Where the current outputs are is asked of the same function ``integrate show`` uses
(``output_folder``: the last recorded run's folder, else the schema's); the set is reloaded when
that folder or its crosswalk changes, so a finished run is seen by the next request. An entity's
story holds the same frames as ``integrate show`` builds (``entity_story``); a test checks that.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
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
    return [{str(k): plain(v) for k, v in r.items()} for r in frame.to_dict("records")]


@dataclass
class OutputSet:
    folder: Path
    stamp: tuple[str, int]
    merged: pd.DataFrame
    crosswalk: pd.DataFrame
    provenance: pd.DataFrame
    records: pd.DataFrame
    clusters: pd.DataFrame
    by_entity: dict[str, np.ndarray]  # entity -> row positions in crosswalk
    prov_by_entity: dict[str, np.ndarray]
    merged_by_entity: dict[str, int]
    entity_of: dict[tuple[str, str], int]  # (source, record_id) -> crosswalk row

    @classmethod
    def load(cls, folder: Path, stamp: tuple[str, int]) -> OutputSet:
        def read(name: str) -> pd.DataFrame:
            path = folder / f"{name}.parquet"
            if not path.exists():
                raise InputError(f"no {name}.parquet in the output folder", file=str(folder), reason="no_outputs",
                                 hint="start a run first (POST .../runs)")
            return pd.read_parquet(path)

        merged, crosswalk, provenance = read("merged"), read("crosswalk"), read("provenance")
        records = read("records").astype({"_source": str, "_record_id": str})
        clusters = read("clusters") if (folder / "clusters.parquet").exists() else pd.DataFrame(columns=["entity_id"])
        crosswalk = crosswalk.astype({"source": str, "record_id": str, "entity_id": str})
        keys = list(zip(crosswalk["source"], crosswalk["record_id"]))
        return cls(folder, stamp, merged, crosswalk, provenance, records.set_index(["_source", "_record_id"]),
                   clusters,
                   {str(k): v for k, v in crosswalk.groupby("entity_id", sort=False).indices.items()},
                   {str(k): v for k, v in provenance.groupby("entity_id", sort=False).indices.items()},
                   {str(e): i for i, e in enumerate(merged["entity_id"].astype(str))},
                   {k: i for i, k in enumerate(keys)})

    def story(self, entity_id: str) -> dict[str, pd.DataFrame] | None:
        """Merged row, member records, provenance and cluster figures (as ``entity_story``)."""
        if entity_id not in self.merged_by_entity:
            return None
        position = self.merged_by_entity[entity_id]
        merged = self.merged.iloc[[position]]
        crosswalk = self.crosswalk.iloc[self.by_entity.get(entity_id, np.zeros(0, np.int64))]
        crosswalk = crosswalk.sort_values(["source", "record_id"], kind="mergesort")
        index = pd.MultiIndex.from_arrays([crosswalk["source"], crosswalk["record_id"]])
        found = self.records.reindex(index).reset_index(drop=True)
        members = pd.concat([crosswalk.reset_index(drop=True),
                             found.assign(_source=crosswalk["source"].to_numpy(),
                                          _record_id=crosswalk["record_id"].to_numpy())], axis=1)
        provenance = self.provenance.iloc[self.prov_by_entity.get(entity_id, np.zeros(0, np.int64))]
        cluster = self.clusters[self.clusters["entity_id"].astype(str) == entity_id] if len(self.clusters) else \
            self.clusters
        return {"merged": merged.reset_index(drop=True), "members": members,
                "provenance": provenance.reset_index(drop=True), "cluster": cluster.reset_index(drop=True)}

    def entity_of_record(self, source: str, record_id: str) -> dict[str, Any] | None:
        position = self.entity_of.get((source, record_id))
        return None if position is None else {str(k): plain(v) for k, v in self.crosswalk.iloc[position].items()}

    def search(self, field: str, value: str, mode: str, limit: int) -> list[dict[str, Any]]:
        """Merged rows whose ``field`` equals (or starts with) ``value``, case and spaces ignored."""
        if field not in self.merged.columns or field == "entity_id":
            raise InputError(f"no field '{field}' in the merged table", value=field, reason="unknown_field",
                             hint="fields: " + ", ".join(c for c in self.merged.columns if c != "entity_id"))
        column = self.merged[field].astype("string").str.strip().str.casefold()
        wanted = value.strip().casefold()
        hit = column.str.startswith(wanted) if mode == "prefix" else column == wanted
        return rows(self.merged[hit.fillna(False).to_numpy()].head(limit))


class ResultsCache:
    """The current output set of one workspace, reloaded when a new run has published one."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self._lock = threading.Lock()
        self._current: OutputSet | None = None

    def stamp(self) -> tuple[Path, tuple[str, int]]:
        folder = current_output_folder(self.root)
        marker = folder / "crosswalk.parquet"
        try:
            return folder, (str(folder.resolve()), marker.stat().st_mtime_ns)
        except OSError:
            return folder, (str(folder), -1)

    def get(self) -> OutputSet:
        folder, stamp = self.stamp()
        current = self._current
        if current is not None and current.stamp == stamp:
            return current
        with self._lock:
            if self._current is None or self._current.stamp != stamp:
                self._current = OutputSet.load(folder, stamp)
            return self._current
