"""Identical records collapsed to one before blocking and expanded after clustering.

An export that repeats a record (the same person 20,000 times) filled every block that held it,
dominated the model's random pairs (the demo's pairwise precision fell from 0.996 to 0.929 with
20,000 copies of one webshop record added) and made clustering work on one huge component. Here
records of one source whose compared fields hold the same standard values are one group: only one
record of it (the representative, the group's smallest record key) is blocked, compared, scored
and clustered; afterwards every copy joins its representative's entity, so copies cost nothing
and always merge.

Only copies within one source are grouped: an export repeating a record is a fact about that
export, while two sources agreeing on every value is evidence the model should weigh.

Kept out of the groups (each stays a record of its own):
- records with fewer than ``MIN_FILLED`` compared fields filled: two records holding only a
  common name are not the same person (our own rule);
- records of sources that hold at most one record per person (``one_per_person``), and records
  a reviewer's decision names, so that every constraint still applies to the records it names.

Copies have no candidate-pair row; ``true_pairs_found`` counts the true pairs a run found with
them (a pair inside a group, or a pair of copies whose representatives are a candidate pair).
"""

from __future__ import annotations

from collections.abc import Collection
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from .cluster import Split, record_keys
from .columns import SOURCE
from .grouped import smallest_in_group

MIN_FILLED = 3  # compared fields a record must fill to be collapsed with its copies


@dataclass
class Identical:
    """Which record stands for which (positions 0..n-1 of the full records)."""

    group: np.ndarray  # per record: the index of its representative among the representatives
    positions: np.ndarray  # per representative (ascending): its position among all records
    full_records: pd.DataFrame
    full_prepared: pd.DataFrame
    estimator: object = None  # a reviewers' estimator whose decided pairs are renumbered meanwhile
    _decided: pd.DataFrame | None = None

    @property
    def collapsed(self) -> int:
        """Records that are copies of another (not matched themselves)."""
        return len(self.group) - len(self.positions)

    @property
    def copy_of(self) -> np.ndarray:
        """Per record, the position of the record that stands for it (itself if it stands alone)."""
        return self.positions[self.group]

    def representatives(self, must_link: np.ndarray | None, cannot_link: np.ndarray | None
                        ) -> tuple[pd.DataFrame, pd.DataFrame, np.ndarray | None, np.ndarray | None]:
        """Records, prepared frame and constraint pairs restricted to the representatives."""
        if not self.collapsed:
            return self.full_records, self.full_prepared, must_link, cannot_link

        def renumber(p: np.ndarray | None) -> np.ndarray | None:
            return None if p is None else self.group[np.asarray(p, dtype=np.int64)]

        decided = getattr(self.estimator, "decided", None)
        if isinstance(decided, pd.DataFrame):  # its records are never grouped: renumbering is one to one
            self._decided = decided
            self.estimator.decided = decided.assign(  # type: ignore[union-attr]
                i=self.group[decided["i"].to_numpy(np.int64)], j=self.group[decided["j"].to_numpy(np.int64)])
        return (self.full_records.iloc[self.positions].reset_index(drop=True),
                self.full_prepared.iloc[self.positions].reset_index(drop=True),
                renumber(must_link), renumber(cannot_link))

    def expand(self, scored: pd.DataFrame, entities: pd.DataFrame, splits: list[Split]
               ) -> tuple[pd.DataFrame, pd.DataFrame, list[Split]]:
        """Pairs, entities and splits in positions of the full records; copies join their entity."""
        if not self.collapsed:
            return scored, entities, splits
        if self._decided is not None:
            self.estimator.decided = self._decided  # type: ignore[union-attr]
        scored = scored.copy()
        scored["i"] = self.positions[scored["i"].to_numpy(dtype=np.int64)]
        scored["j"] = self.positions[scored["j"].to_numpy(dtype=np.int64)]
        before = entities["cluster_size"].to_numpy()[self.group]
        full = entities.iloc[self.group].reset_index(drop=True)
        copy = np.ones(len(full), dtype=bool)
        copy[self.positions] = False
        full.loc[copy, "link_strength"] = 1.0  # identical to its representative
        entity = full["entity_id"].to_numpy()
        size = full.groupby("entity_id", sort=False)["entity_id"].transform("size").to_numpy()
        full["cluster_size"] = size
        sources = pd.Series(self.full_records[SOURCE].astype(str).to_numpy())
        full["sources_in_cluster"] = sources.groupby(entity).transform("nunique").to_numpy()
        grown = (before == 1) & (size > 1)  # a record alone before, now with its copies: certain links
        for column in ("weakest_link", "lowest_pair_probability"):
            if column in full:
                full[column] = full[column].astype("float64")
                full.loc[grown, column] = 1.0
        splits = [replace(s, kept_apart=(int(self.positions[s.kept_apart[0]]), int(self.positions[s.kept_apart[1]])))
                  for s in splits]
        return scored, full, splits


def find_identical(records: pd.DataFrame, prepared: pd.DataFrame, compared: list[str], *,
                   one_per_person: Collection[str] = (), must_link: np.ndarray | None = None,
                   cannot_link: np.ndarray | None = None, estimator: object = None) -> Identical:
    """Group records (positions 0..n-1) of one source whose compared fields hold the same standard values."""
    n = len(records)
    columns = [c for c in compared if c in prepared.columns]
    alone = np.zeros(n, dtype=bool)
    if columns:
        filled = prepared[columns].notna().sum(axis=1).to_numpy()
        alone |= filled < min(MIN_FILLED, len(columns))
    else:
        alone[:] = True
    if one_per_person:
        alone |= records[SOURCE].astype(str).isin(list(one_per_person)).to_numpy()
    decided = getattr(estimator, "decided", None)
    for p in (must_link, cannot_link, decided[["i", "j"]].to_numpy(np.int64) if isinstance(decided, pd.DataFrame)
              else None):
        if p is not None and len(p):
            alone[np.asarray(p, dtype=np.int64).ravel()] = True
    if alone.all():
        return Identical(np.arange(n), np.arange(n), records, prepared, estimator)
    text = prepared[columns].astype("string").fillna("\x00")  # empty differs from any value
    text[SOURCE] = records[SOURCE].astype("string").to_numpy()  # copies within one export
    key = pd.util.hash_pandas_object(text, index=False).to_numpy(np.uint64)
    codes = pd.factorize(key)[0].astype(np.int64)
    # a record kept alone gets a group of its own, numbered after all hash groups
    codes[alone] = codes.max(initial=-1) + 1 + np.arange(int(alone.sum()))
    # each group's representative: its smallest record key, as clustering names entities by it
    stand_for = smallest_in_group(record_keys(records), codes)[codes]  # per record, its representative
    positions = np.unique(stand_for)
    index = np.empty(n, np.int64)
    index[positions] = np.arange(len(positions))
    return Identical(index[stand_for], positions, records, prepared, estimator)
