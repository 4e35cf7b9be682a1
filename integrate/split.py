"""Split by entity: train / validation / test parts or k folds in which no entity spans two parts.

A model trained on one part and tested on another learns nothing from the test part only if the
same person is not in both: duplicates across parts leak. So the unit of assignment is the
entity, and its weight is what is being split: its number of records (``unit="records"``, the
crosswalk's rows) or one merged row (``unit="rows"``).

How parts are drawn: entities are put in a random order fixed by the seed (over the entity IDs
sorted first, so the order of rows in the files does not matter); walking that order, an entity
goes to the part whose share of the total weight its weight's midpoint falls in. Each part's
weight then misses its fraction of the total by at most one entity's weight (half an entity at
each of its two edges). Stratified (``strata``: one label per entity), the walk runs within each
stratum, so the fractions hold within every stratum as well. Vectorised: one sort, one grouped
cumulative sum, one ``searchsorted``.

Example:
    >>> import pandas as pd
    >>> crosswalk = pd.DataFrame({"entity_id": ["E1", "E1", "E2", "E3", "E4"], "record_id": list("abcde")})
    >>> parts = assign_parts(crosswalk["entity_id"].value_counts(), fractions=[0.5, 0.5], seed=1)
    >>> sorted(parts.index), sorted(set(parts))
    (['E1', 'E2', 'E3', 'E4'], ['test', 'train'])
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .outputs.tables import write_tables

MISSING_STRATUM = "(missing)"


class SplitError(InputError):
    """The split's settings cannot be used (exit code 2, like other input errors)."""

    def __init__(self, message: str) -> None:
        super().__init__(message, reason="bad_split_option")


def part_names(count: int, *, folds: bool) -> list[str]:
    """Default labels: train/test, train/validation/test, else part_1.. (fold_1.. for folds)."""
    if folds:
        return [f"fold_{k}" for k in range(1, count + 1)]
    if count == 2:
        return ["train", "test"]
    if count == 3:
        return ["train", "validation", "test"]
    return [f"part_{k}" for k in range(1, count + 1)]


def parse_fractions(text: str) -> list[float]:
    """'0.7,0.15,0.15' -> [0.7, 0.15, 0.15]; they must be positive and add up to 1."""
    try:
        values = [float(v) for v in text.split(",") if v.strip()]
    except ValueError as exc:
        raise SplitError(f"--fractions {text!r}: not a list of numbers ({exc}); e.g. 0.7,0.15,0.15") from exc
    check_fractions(values)
    return values


def check_fractions(values: Sequence[float]) -> None:
    if len(values) < 2:
        raise SplitError(f"fractions {list(values)}: give at least two parts, e.g. 0.7,0.15,0.15")
    if any(not np.isfinite(v) or v <= 0 for v in values):
        raise SplitError(f"fractions {list(values)}: every fraction must be a positive number")
    if abs(sum(values) - 1.0) > 1e-6:
        raise SplitError(f"fractions {list(values)} add up to {sum(values):g}, not 1")


def assign_parts(weights: pd.Series, *, fractions: Sequence[float] | None = None, folds: int | None = None,
                 seed: int = 0, strata: pd.Series | None = None, names: Sequence[str] | None = None) -> pd.Series:
    """One part label per entity.

    Args:
        weights: index entity ID, value the entity's weight (records, or 1 per merged row).
        fractions: the parts' shares (positive, adding up to 1); or
        folds: k equal parts instead.
        seed: fixes the random order.
        strata: index entity ID, value the entity's stratum (missing values form a stratum of their own).
        names: labels of the parts (default ``part_names``).

    Returns:
        a Series indexed like ``weights`` (sorted by entity ID) with the part of each entity.

    Raises:
        SplitError: neither or both of fractions / folds, or unusable values.
    """
    if (fractions is None) == (folds is None):
        raise SplitError("give either fractions or a number of folds")
    if folds is not None:
        if folds < 2:
            raise SplitError(f"--folds {folds}: at least 2 folds")
        fractions = [1.0 / folds] * folds
    assert fractions is not None
    check_fractions(fractions)
    labels = list(names) if names else part_names(len(fractions), folds=folds is not None)
    if len(labels) != len(fractions):
        raise SplitError(f"{len(labels)} part names for {len(fractions)} parts")
    if (weights <= 0).any():
        raise SplitError("every entity needs a positive weight")
    weights = weights.sort_index(kind="mergesort")
    n = len(weights)
    rng = np.random.default_rng(seed)
    order = rng.permutation(n)
    w = weights.to_numpy(dtype=float)[order]
    if strata is None:
        group = np.zeros(n, dtype=np.int64)
    else:
        stratum = strata.reindex(weights.index).astype("string").fillna(MISSING_STRATUM).to_numpy()[order]
        group = pd.factorize(stratum, sort=True)[0]
    frame = pd.DataFrame({"group": group, "w": w, "pos": np.arange(n)})
    frame = frame.sort_values(["group", "pos"], kind="mergesort")  # within a stratum: the random order
    cumulative = frame.groupby("group")["w"].cumsum().to_numpy()
    totals = frame.groupby("group")["w"].transform("sum").to_numpy()
    midpoint = (cumulative - frame["w"].to_numpy() / 2) / totals  # share of the stratum before its middle
    edges = np.cumsum(fractions)[:-1]
    part = np.searchsorted(edges, midpoint, side="right")
    result = np.empty(n, dtype=object)
    result[order[frame["pos"].to_numpy()]] = np.asarray(labels, dtype=object)[part]
    return pd.Series(result, index=weights.index, name="part")


def entity_strata(table: pd.DataFrame, column: str) -> pd.Series:
    """One stratum per entity from a column of the merged table (one row per entity) or the crosswalk
    (several rows per entity: the most frequent value, ties to the smallest)."""
    if column not in table.columns:
        raise SplitError(f"no column {column!r} to stratify by; columns: {', '.join(map(str, table.columns))}")
    values = table[["entity_id", column]].astype({column: "string"}).fillna({column: MISSING_STRATUM})
    counts = values.groupby(["entity_id", column], observed=True).size().rename("n").reset_index()
    counts = counts.sort_values(["entity_id", "n", column], ascending=[True, False, True], kind="mergesort")
    first = counts.drop_duplicates("entity_id")
    return pd.Series(first[column].to_numpy(), index=first["entity_id"].to_numpy(), name=column)


# -- on a run's outputs ---------------------------------------------------------------------------

def read_output(folder: Path, name: str) -> pd.DataFrame:
    """A run's output table (Parquet keeps the types; the CSV is read as text when it is all there is)."""
    parquet, csv = folder / f"{name}.parquet", folder / f"{name}.csv"
    if parquet.exists():
        return pd.read_parquet(parquet)
    if csv.exists():
        return pd.read_csv(csv, dtype="string", keep_default_na=False, na_values=[""])
    raise InputError(f"no {name}.parquet or {name}.csv in the output folder", file=str(folder),
                     reason="missing_file", hint="run `integrate run` first, or point --out at a run's output folder")


@dataclass
class SplitResult:
    """The two split copies and a summary per part."""

    crosswalk: pd.DataFrame
    merged: pd.DataFrame
    summary: pd.DataFrame  # part, entities, records, share_of_records, rows, share_of_rows
    written: list[Path]


def split_outputs(folder: Path, *, fractions: Sequence[float] | None = None, folds: int | None = None,
                  seed: int = 0, unit: str = "records", stratify: str | None = None,
                  names: Sequence[str] | None = None, column: str | None = None,
                  dest: Path | None = None, write: bool = True) -> SplitResult:
    """Assign every entity of a run's outputs to a part; write ``crosswalk_split`` and ``merged_split``
    (CSV and Parquet, all files or none) into ``dest`` (default: the same folder).

    ``unit`` says what the fractions count: ``records`` (crosswalk rows) or ``rows`` (merged rows).
    """
    if unit not in ("records", "rows"):
        raise SplitError(f"unit {unit!r}: use 'records' or 'rows'")
    crosswalk, merged = read_output(folder, "crosswalk"), read_output(folder, "merged")
    column = column or ("fold" if folds is not None else "split")
    for table, name in ((crosswalk, "crosswalk"), (merged, "merged")):
        if column in table.columns:
            raise SplitError(f"{name} already has a column {column!r}: choose another with --column")
    records = crosswalk["entity_id"].value_counts()
    entities = pd.Index(merged["entity_id"].astype(str)).union(records.index.astype(str))
    weights = records.reindex(entities, fill_value=0) if unit == "records" else pd.Series(1, index=entities)
    weights = weights.clip(lower=1)  # a merged row with no crosswalk rows still goes somewhere
    strata = None
    if stratify:
        source = merged if stratify in merged.columns else crosswalk
        strata = entity_strata(source.astype({"entity_id": str}), stratify)
    parts = assign_parts(weights, fractions=fractions, folds=folds, seed=seed, strata=strata, names=names)
    out_crosswalk = crosswalk.assign(**{column: crosswalk["entity_id"].astype(str).map(parts).to_numpy()})
    out_merged = merged.assign(**{column: merged["entity_id"].astype(str).map(parts).to_numpy()})
    count = folds if folds is not None else len(fractions or [])
    labels = list(names) if names else part_names(count, folds=folds is not None)
    by_records = out_crosswalk[column].value_counts()
    by_rows = out_merged[column].value_counts()
    summary = pd.DataFrame({"part": labels})
    summary["entities"] = summary["part"].map(parts.value_counts()).fillna(0).astype(int)
    summary["records"] = summary["part"].map(by_records).fillna(0).astype(int)
    summary["share_of_records"] = (summary["records"] / max(len(out_crosswalk), 1)).round(4)
    summary["rows"] = summary["part"].map(by_rows).fillna(0).astype(int)
    summary["share_of_rows"] = (summary["rows"] / max(len(out_merged), 1)).round(4)
    written: list[Path] = []
    if write:
        written = write_tables(dest or folder, {"crosswalk_split": (out_crosswalk, ("csv", "parquet")),
                                                "merged_split": (out_merged, ("csv", "parquet"))})
    return SplitResult(out_crosswalk, out_merged, summary, written)
