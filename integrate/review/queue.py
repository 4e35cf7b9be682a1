"""The review queue: which item a reviewer sees next, and everything shown about it.

The queue holds the last run's possible links (the band between the two thresholds) and every
suspicious cluster as a whole (``review.clusters``: cut by the run, two records compared as clearly
different, or three or more records hanging by a weak link), listed under the link its proposed
split cuts; an audit queue holds a random sample of automatic links drawn by ``integrate review
--audit``. Items are ordered by how many records a decision would settle (``reach``), and among
items of equal reach the most uncertain first: priority = reach + uncertainty / 2, where
uncertainty = 1 − |2p − 1| is 1 at match probability 0.5 and 0 at 0 or 1 (p of the pair, or of the
link a cluster's proposed split cuts; halved, it stays below 1 and only breaks ties). Reach is, for
a possible link, the records of the group it belongs to when links and possible links are joined
(a decision there can move them all); for a cluster, its records (one decision places every one of
them). Audit items keep their random order, so stopping part-way still leaves a random sample.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import networkx as nx
import numpy as np
import pandas as pd

from ..compare import GRADE_NAMES
from ..errors import InputError
from ..workspace import load_workspace
from .clusters import (
    KEEP,
    Choice,
    ClusterCase,
    Record,
    cluster_payload,
    equivalent_decisions,
    queue_rows,
    suspicious_clusters,
    within,
)
from .diff import diff_segments
from .store import KEY_COLUMNS, DecisionStore, NewDecision, order_pairs, pair_text

POSSIBLE, AUDIT = "possible", "audit"
Key = tuple[str, str, str, str]


@dataclass
class ReviewData:
    """What the last run wrote, loaded once for a review session."""

    root: Path
    pairs: pd.DataFrame  # every candidate pair, ends ordered, indexed by the four key columns
    queue: pd.DataFrame  # possible links in priority order (key columns, probability, priority, reach)
    records: pd.DataFrame  # canonical records indexed by (_source, _record_id)
    fields: dict[str, str]  # canonical field -> type, in schema order
    as_of: dict[str, str]  # source -> as-of date (ISO 8601)
    trust: dict[str, int]  # source -> trust rank
    cases: dict[str, ClusterCase] = dataclasses.field(default_factory=dict)  # suspicious clusters by cluster ID
    anchors: dict[Key, str] = dataclasses.field(default_factory=dict)  # queued anchor pair -> cluster ID
    _snapshot: Any = dataclasses.field(default=None, repr=False, compare=False)  # scores_snapshot's columns

    def position(self, key: Key) -> int | None:
        """The row of a candidate pair in ``pairs`` (its first, were it there twice), or None."""
        try:
            at = self.pairs.index.get_loc(key)
        except KeyError:
            return None
        if isinstance(at, slice):
            return int(at.start)
        if isinstance(at, np.ndarray):
            return int(np.flatnonzero(at)[0])
        return int(at)

    @property
    def sources(self) -> list[str]:
        return sorted(self.as_of)


def _read_output(path: Path, what: str) -> pd.DataFrame:
    if not path.exists():
        raise InputError(f"no {what} from a run", file=str(path), reason="missing_file",
                         hint="run 'integrate run' on this workspace first")
    return pd.read_parquet(path)


def reach_of(pairs: pd.DataFrame) -> np.ndarray:
    """Records in the group of each pair when links and possible links are joined."""
    graph = nx.Graph()
    a = pairs["source_a"] + "\x1f" + pairs["record_id_a"]
    b = pairs["source_b"] + "\x1f" + pairs["record_id_b"]
    graph.add_edges_from(zip(a, b))
    size: dict[str, int] = {}
    for members in nx.connected_components(graph):
        for m in members:
            size[m] = len(members)
    return a.map(size).to_numpy(np.int64) if len(a) else np.zeros(0, np.int64)


def order_queue(pairs: pd.DataFrame, crosswalk: pd.DataFrame | None = None,
                clusters: pd.DataFrame | None = None, splits: pd.DataFrame | None = None,
                cases: list[ClusterCase] | None = None) -> pd.DataFrame:
    """Possible links and suspicious clusters (``cluster_id`` set, under their anchor pair) with
    ``uncertainty``, ``reach`` and ``priority``, highest priority first."""
    joined = pairs[pairs["decision"].isin(["link", "possible link"])].copy()
    joined["reach"] = reach_of(joined)
    possible = joined[joined["decision"] == "possible link"].assign(reason="possible link", cluster_id="")
    if cases is None:
        cases = suspicious_clusters(joined, crosswalk, clusters, splits)
    whole = queue_rows(cases, joined)
    # a possible link that is also a cluster's anchor is reviewed with its cluster
    possible = possible.merge(whole[KEY_COLUMNS], on=KEY_COLUMNS, how="left", indicator=True)
    possible = possible[possible["_merge"] == "left_only"].drop(columns="_merge")
    queue = pd.concat([possible, whole], ignore_index=True)
    queue["uncertainty"] = 1.0 - (2.0 * queue["probability"] - 1.0).abs()
    queue["priority"] = queue["reach"] + queue["uncertainty"] / 2  # records settled first; uncertainty breaks ties
    return queue.sort_values(["priority"] + KEY_COLUMNS, ascending=[False] + [True] * 4,
                             kind="mergesort").reset_index(drop=True)


def load_review_data(workspace: str | Path) -> ReviewData:
    """Load the last run's pairs and records of a workspace for reviewing."""
    ws = load_workspace(workspace)
    from ..outputs.publish import current_output_folder

    out = current_output_folder(ws.root, default=ws.output_dir)  # the last run's folder, wherever --out put it
    pairs = order_pairs(_read_output(out / "pairs.parquet", "candidate pairs"))
    records = _read_output(out / "records.parquet", "canonical records")
    # sorted indexes: look-ups from the server's worker threads never touch an unsorted MultiIndex
    records = records.astype({"_source": str, "_record_id": str}).set_index(["_source", "_record_id"]).sort_index()
    fields = {name: f.type for name, f in ws.canonical.fields.items()}
    as_of = {e.mapping.source: e.mapping.as_of.isoformat() for e in ws.sources}
    trust = {e.mapping.source: e.mapping.trust for e in ws.sources}
    crosswalk = pd.read_csv(out / "crosswalk.csv", dtype=str) if (out / "crosswalk.csv").exists() else None
    clusters = pd.read_parquet(out / "clusters.parquet") if (out / "clusters.parquet").exists() else None
    splits = (pd.read_csv(out / "splits.csv", dtype={c: str for c in KEY_COLUMNS + ["reason", "detail"]})
              if (out / "splits.csv").exists() else None)
    joined = pairs[pairs["decision"].isin(["link", "possible link"])]
    cases = suspicious_clusters(joined, crosswalk, clusters, splits)
    queue = order_queue(pairs, cases=cases)
    anchored = queue.loc[queue["cluster_id"] != "", KEY_COLUMNS + ["cluster_id"]]
    return ReviewData(Path(workspace), pairs.set_index(KEY_COLUMNS, drop=False).sort_index(), queue, records,
                      fields, as_of, trust, {c.cluster_id: c for c in cases},
                      {tuple(row[:4]): row[4] for row in anchored.itertuples(index=False, name=None)})


def _differs(frame: pd.DataFrame, field: str, ftype: str) -> pd.Series:
    column = "grade_" + field
    if column not in frame:
        return pd.Series(False, index=frame.index)
    agree = [GRADE_NAMES[ftype][-1], "missing"]
    if ftype == "date":
        agree.append(GRADE_NAMES["date"][2])  # the year agrees and one side has nothing more
    return ~frame[column].isin(agree) & frame[column].notna()


def queue_items(data: ReviewData, store: DecisionStore, kind: str = POSSIBLE, *, source: str | None = None,
                field: str | None = None) -> pd.DataFrame:
    """The queue as it stands: key columns + ``state`` (open / deferred / decided) in review order."""
    if kind == AUDIT:
        sample = store.audit_sample()
        items = sample[KEY_COLUMNS].merge(data.pairs.reset_index(drop=True), on=KEY_COLUMNS, how="inner")
    else:
        items = data.queue
    if source:
        items = items[(items["source_a"] == source) | (items["source_b"] == source)]
    if field:
        items = items[_differs(items, field, data.fields.get(field, "text")).to_numpy()]
    decided = store.decided()
    keys = list(items[KEY_COLUMNS].itertuples(index=False, name=None))
    states = [decided.get(k) for k in keys]
    out = items[KEY_COLUMNS + ["probability"]].copy()
    out["state"] = ["open" if s is None else ("deferred" if s == "defer" else "decided") for s in states]
    return out.reset_index(drop=True)


def next_key(data: ReviewData, store: DecisionStore, reviewer: str, kind: str = POSSIBLE, *,
             source: str | None = None, field: str | None = None, skip: Key | None = None, claim: bool = True
             ) -> tuple[Key | None, dict[str, int]]:
    """The next pair for this reviewer and the queue's progress; ``claim`` holds it for them (a write:
    only on a POST), without it the pair is only looked up."""
    items = queue_items(data, store, kind, source=source, field=field)
    progress = {"total": len(items), "decided": int((items["state"] == "decided").sum()),
                "deferred": int((items["state"] == "deferred").sum())}
    progress["remaining"] = progress["total"] - progress["decided"]
    others = store.claimed_by_others(reviewer)
    keys = list(items[KEY_COLUMNS].itertuples(index=False, name=None))
    state = items["state"].to_numpy()
    chosen: Key | None = None
    for wanted in ("open", "deferred"):
        candidates = [k for k, s in zip(keys, state) if s == wanted and k != skip]
        # first a pair nobody else holds (claiming is atomic, so two reviewers never get the same one)
        chosen = next((k for k in candidates if pair_text(k) not in others
                       and (not claim or store.claim(k, reviewer))), None)
        if chosen is None and candidates:
            chosen = candidates[0]  # all held by others: show one anyway; the store settles any race
        if chosen is not None:
            break
    return chosen, progress


def format_value(value: Any, ftype: str) -> str:
    """A canonical value as the reviewer reads it ('' when missing)."""
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return ""
    if isinstance(value, float | np.floating):
        if ftype == "money":
            return f"{value:.2f}"
        return f"{value:.2f}".rstrip("0").rstrip(".")
    return str(value)


def field_weights(row: pd.Series, fields: dict[str, str]) -> dict[str, tuple[float | None, str]]:
    """Weight (bits) shown per field, with a note when fields were weighed together."""
    shown: dict[str, tuple[float | None, str]] = {}
    for column in row.index:
        if not str(column).startswith("weight_"):
            continue
        parts = str(column)[len("weight_"):].split("+")
        value = float(row[column]) if pd.notna(row[column]) else 0.0
        for f in parts:  # exact agreement on a rare value adds bits (value-frequency weighting)
            bonus = row.get("value_frequency_" + f)
            if bonus is not None and pd.notna(bonus):
                value += float(bonus)
        note = "" if len(parts) == 1 else f"{' and '.join(parts)} weighed together"
        shown[parts[0]] = (value, note)
        for f in parts[1:]:
            shown[f] = (None, f"counted with {parts[0]}")
    return {f: shown.get(f, (None, "")) for f in fields}


def item_payload(data: ReviewData, key: Key, kind: str = POSSIBLE) -> dict[str, Any]:
    """Everything the page (or the terminal) shows about one pair; values are plain text."""
    row = data.pairs.loc[key]
    if isinstance(row, pd.DataFrame):
        row = row.iloc[0]
    ends = []
    values = []
    for source, record_id in ((key[0], key[1]), (key[2], key[3])):
        ends.append({"source": source, "record_id": record_id, "as_of": data.as_of.get(source, ""),
                     "trust": data.trust.get(source)})
        found = (source, record_id) in data.records.index
        values.append(data.records.loc[(source, record_id)] if found else None)
    weights = field_weights(row, data.fields)
    fields = []
    for name, ftype in data.fields.items():
        a = format_value(values[0][name], ftype) if values[0] is not None else ""
        b = format_value(values[1][name], ftype) if values[1] is not None else ""
        seg_a, seg_b = diff_segments(a, b) if a and b else ([(a, False)], [(b, False)])
        grade = row.get("grade_" + name)
        weight, note = weights[name]
        fields.append({"name": name, "type": ftype, "a": a, "b": b, "a_parts": seg_a, "b_parts": seg_b,
                       "grade": None if grade is None or pd.isna(grade) else str(grade),
                       "weight": None if weight is None else round(weight, 2), "weight_note": note,
                       "compared": grade is not None and not pd.isna(grade)})
    probability = float(row["probability"])
    return {
        "key": dict(zip(KEY_COLUMNS, key)), "id": pair_text(key), "kind": kind,
        "probability": probability, "weight": float(row["weight"]), "run_decision": str(row["decision"]),
        "blocking_rules": str(row.get("blocking_rules") or ""), "records": ends, "fields": fields,
        "reason": _queue_reason(data, key),
        "uncertainty": round(1.0 - abs(2.0 * probability - 1.0), 4) if math.isfinite(probability) else None,
    }


def _queue_reason(data: ReviewData, key: Key) -> str:
    """Why the pair is in the queue ('possible link', or which suspicious cluster it holds together)."""
    mask = np.ones(len(data.queue), bool)
    for column, value in zip(KEY_COLUMNS, key):
        mask &= (data.queue[column] == value).to_numpy()
    hits = data.queue.loc[mask, "reason"] if "reason" in data.queue else pd.Series(dtype=str)
    return str(hits.iloc[0]) if len(hits) else ""


SNAPSHOT_PREFIXES = ("grade_", "weight_", "value_frequency_")


def scores_snapshot(data: ReviewData, key: Key) -> dict[str, Any]:
    """The scores at the time of a decision: probability, weight, grades and weights per field.

    Read from the pair's row of column arrays taken once per review data (a row of a wide mixed
    frame costs far more than a decision's other work).
    """
    if data._snapshot is None:
        pairs = data.pairs
        data._snapshot = ([(str(c), str(c).startswith("grade_"), pairs[c].array) for c in pairs.columns
                           if str(c).startswith(SNAPSHOT_PREFIXES)],
                          pairs["probability"].array, pairs["weight"].array, pairs["decision"].array)
    columns, probability, weight, decision = data._snapshot
    at = data.position(key)
    if at is None:
        raise KeyError(key)
    scores = {}
    for name, is_grade, values in columns:
        value = values[at]
        scores[name] = None if pd.isna(value) else (str(value) if is_grade else float(value))
    return {"probability": float(probability[at]), "weight": float(weight[at]),
            "run_decision": str(decision[at]), "scores": scores}


def cluster_item(data: ReviewData, store: DecisionStore, cluster_id: str) -> dict[str, Any]:
    """Everything the page shows about a suspicious cluster, with the standing decisions on it."""
    case = data.cases[cluster_id]
    pairs = within(data.pairs.reset_index(drop=True), list(case.members))
    decided = store.decisions_on(list(pairs[KEY_COLUMNS].itertuples(index=False, name=None)))
    payload = cluster_payload(case, pairs, data.records, data.fields, data.as_of, data.trust, decided,
                              format_value)
    standing = store.cluster_decisions(cluster_id)
    payload["decision"] = standing[-1] if standing else None
    return payload


def decide_cluster(data: ReviewData, store: DecisionStore, cluster_id: str, choice: Choice, reviewer: str, *,
                   part_a: list[Record] | None = None, note: str | None = None) -> dict[str, Any]:
    """Record one decision on a whole cluster as its equivalent pairwise decisions (``review.clusters``).

    Raises:
        BadSplit: ``part_a`` names a record outside the cluster or leaves a part empty.
        DecisionConflict: someone else decided one of the pairs otherwise (nothing is stored).
    """
    case = data.cases[cluster_id]
    pairs = within(data.pairs.reset_index(drop=True), list(case.members))
    wanted = equivalent_decisions(case, pairs, choice, part_a)
    news = []
    for key, decision in wanted:
        snapshot = scores_snapshot(data, key) if key in data.pairs.index else {}
        news.append(NewDecision(**dict(zip(KEY_COLUMNS, key)), decision=decision, reviewer=reviewer,  # type: ignore[arg-type]
                                note=note, origin="cluster", **snapshot))
    side = set(case.members if choice == KEEP else (case.part_a if part_a is None else part_a))
    parts = {"A": [list(m) for m in case.members if m in side], "B": [list(m) for m in case.members if m not in side]}
    return store.record_cluster(cluster_id, choice, parts, news)
