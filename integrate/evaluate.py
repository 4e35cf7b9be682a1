"""Quality of a result against known truth: pairwise and B-cubed precision/recall/F1, blocking figures.

Definitions (Christen 2012, *Data Matching*, ch. 7; Christen & Goiser 2007): precision TP/(TP+FP),
recall TP/(TP+FN), F-measure 2PR/(P+R); pairs completeness = true matches among candidates / all
true matches; reduction ratio = 1 - candidates / all pairs. B-cubed averages per record
(Bagga & Baldwin 1998).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError


@dataclass(frozen=True)
class Scores:
    precision: float
    recall: float
    f1: float

    @classmethod
    def from_counts(cls, tp: float, fp: float, fn: float) -> Scores:
        p = tp / (tp + fp) if tp + fp else 1.0
        r = tp / (tp + fn) if tp + fn else 1.0
        f = 2 * p * r / (p + r) if p + r else 0.0
        return cls(p, r, f)


@dataclass(frozen=True)
class Evaluation:
    pairwise: Scores
    bcubed: Scores
    true_pairs: int
    predicted_pairs: int
    pairs_completeness: float | None = None
    reduction_ratio: float | None = None

    def as_dict(self) -> dict[str, object]:
        return asdict(self)


def _codes(labels: pd.Series) -> np.ndarray:
    return pd.factorize(labels)[0]


def cluster_pairs(labels: np.ndarray) -> set[tuple[int, int]]:
    """All within-cluster record pairs (i < j) for integer cluster labels."""
    frame = pd.DataFrame({"c": labels, "pos": np.arange(len(labels))})
    sizes = frame["c"].map(frame["c"].value_counts())
    frame = frame[sizes.to_numpy() > 1]
    joined = frame.merge(frame, on="c")
    joined = joined[joined["pos_x"] < joined["pos_y"]]
    return set(zip(joined["pos_x"].tolist(), joined["pos_y"].tolist()))


def _pair_count(labels: np.ndarray) -> int:
    sizes = np.bincount(labels)
    return int((sizes * (sizes - 1) // 2).sum())


def pairwise_scores(predicted: np.ndarray, truth: np.ndarray) -> tuple[Scores, int, int]:
    """Pairwise precision/recall/F1 of two clusterings given as label arrays (same records)."""
    both = pd.DataFrame({"p": predicted, "t": truth})
    tp = int((both.value_counts().to_numpy() * (both.value_counts().to_numpy() - 1) // 2).sum())
    pred_pairs, true_pairs = _pair_count(predicted), _pair_count(truth)
    return Scores.from_counts(tp, pred_pairs - tp, true_pairs - tp), true_pairs, pred_pairs


def bcubed_scores(predicted: np.ndarray, truth: np.ndarray) -> Scores:
    """B-cubed precision and recall: per record, share of its cluster that is correct, averaged."""
    both = pd.DataFrame({"p": predicted, "t": truth})
    n_pt = both.groupby(["p", "t"])["p"].transform("size").to_numpy(float)
    n_p = both.groupby("p")["p"].transform("size").to_numpy(float)
    n_t = both.groupby("t")["t"].transform("size").to_numpy(float)
    p = float((n_pt / n_p).mean()) if len(both) else 1.0
    r = float((n_pt / n_t).mean()) if len(both) else 1.0
    return Scores(p, r, 2 * p * r / (p + r) if p + r else 0.0)


def true_pairs_found(entity: np.ndarray, i: np.ndarray, j: np.ndarray, copy_of: np.ndarray | None = None,
                     *, inside: bool = True) -> int:
    """True pairs among candidate pairs (positions ``i``, ``j``), given each record's true entity
    code (-1: unknown).

    With ``copy_of`` (per record, the position of the record matched for it; see identical.py)
    a candidate pair of two representatives stands for every pair of their copies, and a pair of
    copies of one record was found without being compared (counted unless ``inside`` is false,
    as in linkage, where pairs within one file are not wanted).
    """
    entity = np.asarray(entity, np.int64)
    i, j = np.asarray(i, np.int64), np.asarray(j, np.int64)
    if copy_of is None:
        return int(((entity[i] == entity[j]) & (entity[i] >= 0)).sum())
    known = entity >= 0
    counts = (pd.DataFrame({"g": np.asarray(copy_of, np.int64)[known], "e": entity[known]})
              .value_counts().rename("c").reset_index())
    c = counts["c"].to_numpy(np.int64)
    within = int((c * (c - 1) // 2).sum()) if inside else 0
    # a representative without copies stands for itself alone: its pairs count as without copy_of,
    # and only the (few) pairs touching a record with copies need the join below
    copy_of = np.asarray(copy_of, np.int64)
    has_copies = np.zeros(len(entity), bool)
    has_copies[copy_of[copy_of != np.arange(len(copy_of))]] = True
    plain = ~(has_copies[i] | has_copies[j])
    alone = int(((entity[i[plain]] == entity[j[plain]]) & (entity[i[plain]] >= 0)).sum())
    i, j = i[~plain], j[~plain]
    pairs = pd.DataFrame({"a": i, "b": j})
    left = pairs.merge(counts.rename(columns={"g": "a", "c": "ca"}), on="a")
    both = left.merge(counts.rename(columns={"g": "b", "c": "cb"}), on=["b", "e"])
    return within + alone + int((both["ca"].to_numpy(np.int64) * both["cb"].to_numpy(np.int64)).sum())


def evaluate(crosswalk: pd.DataFrame, truth: pd.DataFrame, candidates: pd.DataFrame | None = None,
             records: pd.DataFrame | None = None, all_pairs: int | None = None,
             copy_of: np.ndarray | None = None) -> Evaluation:
    """Compare a crosswalk (source, record_id, entity_id) with a true one.

    Records missing from the truth are ignored; ``candidates`` (pairs of positions i, j into
    ``records``) adds pairs completeness and the reduction ratio; ``copy_of`` (a match result's)
    counts the pairs its identical records stand for (``true_pairs_found``).
    """
    key = ["source", "record_id"]
    pred = crosswalk[key + ["entity_id"]].astype({"source": str, "record_id": str})
    true = truth[key + ["entity_id"]].astype({"source": str, "record_id": str})
    joined = pred.merge(true, on=key, suffixes=("_pred", "_true"), how="inner")
    p_labels = _codes(joined["entity_id_pred"])
    t_labels = _codes(joined["entity_id_true"])
    pairwise, true_pairs, pred_pairs = pairwise_scores(p_labels, t_labels)
    completeness = None
    reduction = None
    if candidates is not None and records is not None:
        lookup = true.set_index(key)["entity_id"]
        rec_keys = pd.MultiIndex.from_arrays([records["_source"].astype(str), records["_record_id"].astype(str)])
        rec_entity = pd.factorize(lookup.reindex(rec_keys).to_numpy())[0]  # -1 where unknown
        found = true_pairs_found(rec_entity, candidates["i"].to_numpy(), candidates["j"].to_numpy(), copy_of)
        completeness = found / true_pairs if true_pairs else 1.0
        n = len(records)
        total = all_pairs if all_pairs is not None else n * (n - 1) // 2
        reduction = 1.0 - len(candidates) / total if total else 0.0
    return Evaluation(pairwise, bcubed_scores(p_labels, t_labels), true_pairs, pred_pairs, completeness,
                      reduction)


def _pairs_in_groups(frame: pd.DataFrame, keys: list[str]) -> int:
    sizes = frame.value_counts(keys).to_numpy(np.int64)
    return int((sizes * (sizes - 1) // 2).sum())


def scores_by_source_kind(crosswalk: pd.DataFrame, truth: pd.DataFrame) -> dict[str, Scores]:
    """Pairwise precision/recall/F1 for record pairs within one source and pairs across sources.

    A predicted pair counts where both records are in one predicted entity, a true pair where
    they are one true person; records missing from the truth are ignored, as in ``evaluate``.
    """
    key = ["source", "record_id"]
    pred = crosswalk[key + ["entity_id"]].astype({"source": str, "record_id": str})
    true = truth[key + ["entity_id"]].astype({"source": str, "record_id": str})
    joined = pred.merge(true, on=key, suffixes=("_pred", "_true"), how="inner")
    counts = {}
    for within, extra in (("within", ["source"]), ("all", [])):
        counts[within] = (_pairs_in_groups(joined, ["entity_id_pred", "entity_id_true"] + extra),
                          _pairs_in_groups(joined, ["entity_id_pred"] + extra),
                          _pairs_in_groups(joined, ["entity_id_true"] + extra))
    tp_w, pred_w, true_w = counts["within"]
    tp_a, pred_a, true_a = (a - w for a, w in zip(counts["all"], counts["within"], strict=True))
    return {"within one source": Scores.from_counts(tp_w, pred_w - tp_w, true_w - tp_w),
            "across sources": Scores.from_counts(tp_a, pred_a - tp_a, true_a - tp_a)}


def read_crosswalk_file(path: str | Path) -> pd.DataFrame:
    """A crosswalk CSV (source, record_id, entity_id), checked."""
    if not Path(path).exists():
        raise InputError("file not found", file=str(path), reason="missing_file")
    frame = pd.read_csv(path, dtype=str)
    missing = {"source", "record_id", "entity_id"} - set(frame.columns)
    if missing:
        raise InputError(f"missing columns {sorted(missing)}", file=str(path), line=1, reason="missing_column",
                         hint="a crosswalk has columns source, record_id, entity_id")
    return frame


def hard_negatives(records: pd.DataFrame, prepared: pd.DataFrame, candidates: pd.DataFrame,
                   entity_ids: np.ndarray, truth: pd.DataFrame, *, given: str, family: str,
                   contact: list[str]) -> pd.DataFrame:
    """How the hardest non-matches fared: candidate pairs of different true people who are twins
    (when the truth marks them), share a family name and a contact detail (relatives), or a full
    name (namesakes).

    Twins are marked by an optional truth column ``twins``: one label shared by the records of
    the twins of one family, blank for everyone else. A twins' pair counts as twins only, not
    also as relatives or namesakes. Returns one row per kind: pairs of that kind among the
    candidates and how many of them ended up in one entity (a wrong merge).
    """
    key = pd.MultiIndex.from_arrays([records["_source"].astype(str), records["_record_id"].astype(str)])
    indexed = truth.assign(source=truth["source"].astype(str), record_id=truth["record_id"].astype(str)) \
        .set_index(["source", "record_id"])
    true_entity = indexed["entity_id"].reindex(key).to_numpy()
    i, j = candidates["i"].to_numpy(), candidates["j"].to_numpy()
    different = (true_entity[i] != true_entity[j]) & pd.notna(true_entity[i]) & pd.notna(true_entity[j])

    def same_code(values) -> np.ndarray:
        codes = pd.factorize(values, use_na_sentinel=True)[0]
        return (codes[i] == codes[j]) & (codes[i] >= 0)

    def same(column: str) -> np.ndarray:
        return same_code(prepared[column])

    twins = np.zeros(len(i), bool)
    if "twins" in indexed.columns:
        labels = indexed["twins"].reindex(key)
        twins = different & same_code(labels.where(labels.astype(str).str.strip() != "").to_numpy())
    same_family = same(family)
    shares_contact = np.zeros(len(i), bool)
    for column in contact:
        shares_contact |= same(column)
    kinds = {}
    if "twins" in indexed.columns:
        kinds["twins (marked in the truth: same family, birth date and home)"] = twins
    kinds["relatives (same family name and a shared contact detail, different given name)"] = \
        different & ~twins & same_family & shares_contact & ~same(given)
    kinds["namesakes (same given and family name)"] = different & ~twins & same_family & same(given)
    merged = entity_ids[i] == entity_ids[j]
    rows = [{"kind": kind, "candidate pairs": int(mask.sum()), "wrongly merged": int((mask & merged).sum())}
            for kind, mask in kinds.items()]
    return pd.DataFrame(rows)
