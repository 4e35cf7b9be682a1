"""Suspicious clusters reviewed as a whole: their records, the pairs inside, and a proposed split.

A cluster is suspicious when the run cut it (the chaining guard or a one-per-person source), when
two of its records compared as clearly different (a pair below ``SUSPICIOUS_PAIR``), or when it has
at least three records and hangs by a link weaker than ``SUSPICIOUS_LINK``. Each becomes one review case:

- **cut by the run**: every cut in ``splits.csv`` between two entities of this run that the run
  made itself (the chaining guard, a one-per-person source; not a reviewer's ``different``
  decision) is a case of both entities together, split where the run split them (part A one
  entity, part B the other);
- **whole but doubtful**: the entity's records, split at the weakest link of a maximum spanning
  tree of its links (the figure ``cluster.py`` reports as ``weakest_link``); when two records
  compared below ``SUSPICIOUS_PAIR``, at the weakest link on the tree's path between the most
  clearly different two, so the proposal separates them.

One decision settles a case, stored as the pairwise decisions that make the next run's clustering
reproduce it (``review/apply.py`` turns ``same`` into a must-link, never cut, and ``different`` into
a cannot-link): *keep together* is ``same`` on a spanning tree of the case's records; *split* is
``same`` on a spanning tree of each part and ``different`` on one pair across. Fewer would not do:
without the must-links a cannot-link lets clustering choose its own cut, and without the
cannot-link the links across would join the parts again. The case's anchor pair (the proposed
cut's link) is always among them, so the queue, which lists a case under its anchor, sees it decided.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

import networkx as nx
import numpy as np
import pandas as pd

from .store import KEY_COLUMNS, ordered_pair

SUSPICIOUS_LINK = 0.95  # a cluster of 3+ records held by a link below this is worth a look
SUSPICIOUS_PAIR = 0.2  # ... and so is one holding two records that compared below this
RUN_CUT, WEAKEST_LINK = "run cut", "weakest link"
KEEP, SPLIT = "keep together", "split"
Record = tuple[str, str]  # (source, record ID)
Key = tuple[str, str, str, str]
Choice = Literal["keep together", "split"]


@dataclass(frozen=True)
class ClusterCase:
    """One suspicious cluster to review as a whole (records in (source, record ID) order)."""

    cluster_id: str  # the entity ID, or two joined by '+' for a cut between two entities
    entity_ids: tuple[str, ...]
    members: tuple[Record, ...]
    part_a: tuple[Record, ...]  # the proposed split: these records on one side, the rest on the other
    anchor: Key  # the link the proposal cuts (the strongest one across, for a run's cut)
    probability: float  # the anchor's match probability
    proposal: str  # RUN_CUT or WEAKEST_LINK
    reason: str  # why the case is in the queue, in words

    @property
    def part_b(self) -> tuple[Record, ...]:
        chosen = set(self.part_a)
        return tuple(m for m in self.members if m not in chosen)


class BadSplit(ValueError):
    """A reviewer's split that names a record outside the cluster or leaves a part empty."""

    def __init__(self, message: str, value: str = "") -> None:
        self.value = value
        super().__init__(message)


def _inside_links(pairs: pd.DataFrame, entity: pd.Series) -> pd.DataFrame:
    """Candidate pairs whose two records share an entity, with that ``entity_id``."""
    ea = entity.reindex(pd.MultiIndex.from_arrays([pairs["source_a"], pairs["record_id_a"]])).to_numpy()
    eb = entity.reindex(pd.MultiIndex.from_arrays([pairs["source_b"], pairs["record_id_b"]])).to_numpy()
    held = (ea == eb) & pd.notna(ea)
    return pairs[held].assign(entity_id=ea[held])


def _keys(pairs: pd.DataFrame, end: str) -> pd.Series:
    return pairs[f"source_{end}"].astype(str) + "\x1f" + pairs[f"record_id_{end}"].astype(str)


def _texts(records: list[Record]) -> list[str]:
    return [f"{s}\x1f{r}" for s, r in records]


def within(pairs: pd.DataFrame, members: list[Record]) -> pd.DataFrame:
    """The pairs whose two records are both among ``members``."""
    wanted = _texts(members)
    return pairs[_keys(pairs, "a").isin(wanted).to_numpy() & _keys(pairs, "b").isin(wanted).to_numpy()]


def _link_rows(links: pd.DataFrame) -> list[tuple[str, str, str, str, float]]:
    """The links as (key..., probability) tuples in their frame's order (a cluster has few: no frame ops)."""
    return list(zip(links["source_a"], links["record_id_a"], links["source_b"], links["record_id_b"],
                    links["probability"].astype(float)))


def _graph(links: pd.DataFrame | list[tuple[str, str, str, str, float]]) -> nx.Graph:
    """Records as nodes, links as edges weighted by probability, entered in key order (deterministic ties)."""
    graph = nx.Graph()
    rows = _link_rows(links) if isinstance(links, pd.DataFrame) else links
    for sa, ra, sb, rb, p in sorted(rows, key=lambda r: r[:4]):  # stable, as a mergesort on the key columns
        graph.add_edge((sa, ra), (sb, rb), probability=p)
    return graph


def _weakest(tree: nx.Graph, edges: list[tuple[Record, Record]]) -> tuple[Record, Record]:
    return min(edges, key=lambda e: (tree.edges[e]["probability"], ordered_pair(*e[0], *e[1])))


def propose_split(links: pd.DataFrame, members: list[Record]) -> tuple[tuple[Record, ...], Key, float]:
    """Part A and the cut link for one whole cluster (see the module docstring), from its links."""
    rows = _link_rows(links)
    tree = nx.maximum_spanning_tree(_graph(rows), weight="probability", algorithm="kruskal")
    edges = [tuple(sorted(e)) for e in tree.edges()]
    if not edges:
        raise BadSplit("the cluster has no link to cut")
    lowest = min(rows, key=lambda r: (r[4], r[:4]))  # the first of the lowest, as a stable sort would give
    a, b = (lowest[0], lowest[1]), (lowest[2], lowest[3])
    if lowest[4] < SUSPICIOUS_PAIR and nx.has_path(tree, a, b):
        path = nx.shortest_path(tree, a, b)
        cut = _weakest(tree, [tuple(sorted(e)) for e in zip(path, path[1:])])
    else:
        cut = _weakest(tree, edges)
    probability = float(tree.edges[cut]["probability"])
    tree.remove_edge(*cut)
    far = nx.node_connected_component(tree, cut[1])
    side = [m for m in members if m in far]
    rest = [m for m in members if m not in far]
    part_a = rest if members[0] in rest else side  # part A holds the first record, so it is never empty
    return tuple(part_a), ordered_pair(*cut[0], *cut[1]), probability


def suspicious_clusters(pairs: pd.DataFrame, crosswalk: pd.DataFrame | None, clusters: pd.DataFrame | None,
                        splits: pd.DataFrame | None = None) -> list[ClusterCase]:
    """Every suspicious cluster of a run as a review case (see the module docstring).

    Args:
        pairs: the run's links and possible links (key columns in the store's order, probability, decision).
        crosswalk: ``crosswalk.csv`` (source, record_id, entity_id); clusters: ``clusters.parquet``;
        splits: ``splits.csv`` (the run's cuts).
    """
    if crosswalk is None or clusters is None or pairs.empty:
        return []
    crosswalk = crosswalk.astype({"source": str, "record_id": str, "entity_id": str})
    entity = crosswalk.set_index(["source", "record_id"])["entity_id"]
    entity = entity[~entity.index.duplicated()]
    members_of = _Members(crosswalk)
    table = clusters.set_index("entity_id")
    cut = table["cut_by"].fillna("").astype(str) != ""
    odd = (table["lowest_pair_probability"] < SUSPICIOUS_PAIR) | (
        (table["records"] >= 3) & (table["weakest_link"] < SUSPICIOUS_LINK))
    asked = table.index[(odd & ~cut).to_numpy()].astype(str)
    links = pairs[pairs["decision"] == "link"]
    inside = _inside_links(pairs, entity)
    inside_links = inside[(inside["decision"] == "link").to_numpy() & inside["entity_id"].isin(asked).to_numpy()]
    cases: list[ClusterCase] = []
    # one case per suspicious cluster (a few hundred at most): a small graph each, not a row loop
    for entity_id, group in inside_links.groupby("entity_id", sort=True):
        members = members_of[entity_id]
        part_a, anchor, p = propose_split(group, members)
        info = table.loc[entity_id]
        reason = (f"suspicious cluster {entity_id}: {len(members)} records from {int(info['sources'])} sources, "
                  f"weakest link {float(info['weakest_link']):.3f}, lowest pair probability "
                  f"{float(info['lowest_pair_probability']):.3f}")
        cases.append(ClusterCase(str(entity_id), (str(entity_id),), tuple(members), part_a, anchor, p,
                                 WEAKEST_LINK, reason))
    cases.extend(_run_cuts(links, entity, members_of, splits))
    return sorted(cases, key=lambda c: c.cluster_id)


class _Members:
    """An entity's records, sorted, from the crosswalk sorted once (an entity's rows are one slice)."""

    def __init__(self, crosswalk: pd.DataFrame) -> None:
        ordered = crosswalk.sort_values(["entity_id", "source", "record_id"], kind="mergesort")
        self.ids = ordered["entity_id"].to_numpy(dtype=object)
        self.records = list(zip(ordered["source"], ordered["record_id"]))

    def __getitem__(self, entity_id: str) -> list[Record]:
        lo = int(np.searchsorted(self.ids, entity_id, side="left"))
        hi = int(np.searchsorted(self.ids, entity_id, side="right"))
        if lo == hi:
            raise KeyError(entity_id)
        return self.records[lo:hi]


def _run_cuts(links: pd.DataFrame, entity: pd.Series, members_of: _Members,
              splits: pd.DataFrame | None) -> list[ClusterCase]:
    """One case per pair of entities a cut of this run separated (the cut's strongest link as anchor)."""
    if splits is None or splits.empty:
        return []
    # a cut a reviewer's 'different' decision made was reviewed already: only the run's own cuts are asked
    cuts = splits[splits["reason"].isin(["chaining guard", "one record per person"])]
    ea = entity.reindex(pd.MultiIndex.from_arrays([links["source_a"], links["record_id_a"]])).to_numpy()
    eb = entity.reindex(pd.MultiIndex.from_arrays([links["source_b"], links["record_id_b"]])).to_numpy()
    across = links.assign(entity_a=ea, entity_b=eb)
    across = across[pd.notna(ea) & pd.notna(eb) & (ea != eb)]
    cases: dict[str, ClusterCase] = {}
    for row in cuts.itertuples(index=False):  # splits.csv holds one row per cut: tens, not millions
        one = entity.get((str(row.source_a), str(row.record_id_a)))
        other = entity.get((str(row.source_b), str(row.record_id_b)))
        if one is None or other is None or one == other:
            continue
        first, second = sorted((str(one), str(other)))
        cluster_id = f"{first}+{second}"
        between = across[((across["entity_a"] == first) & (across["entity_b"] == second))
                         | ((across["entity_a"] == second) & (across["entity_b"] == first))]
        if cluster_id in cases or between.empty:
            continue
        strongest = between.sort_values("probability", ascending=False, kind="mergesort").iloc[0]
        members = sorted(members_of[first] + members_of[second])
        home = first if members[0] in members_of[first] else second  # part A holds the first record
        part_a = tuple(m for m in members if m in set(members_of[home]))
        detail = "" if pd.isna(row.detail) or not str(row.detail) else f"; {row.detail}"
        reason = (f"cut by the run ({row.reason}{detail}): "
                  f"entities {first} and {second}, {len(members)} records; the strongest link cut "
                  f"{float(strongest['probability']):.3f}")
        cases[cluster_id] = ClusterCase(cluster_id, (first, second), tuple(members), part_a,
                                        tuple(str(strongest[c]) for c in KEY_COLUMNS),  # type: ignore[arg-type]
                                        float(strongest["probability"]), RUN_CUT, reason)
    return list(cases.values())


def queue_rows(cases: list[ClusterCase], pairs: pd.DataFrame) -> pd.DataFrame:
    """The queue's rows for the cases: each under its anchor pair, ``reach`` = the records it settles."""
    if not cases:
        return pairs.iloc[0:0].assign(reason="", reach=0, cluster_id="")
    frame = pd.DataFrame([dict(zip(KEY_COLUMNS, c.anchor)) | {"reason": c.reason, "reach": len(c.members),
                                                             "cluster_id": c.cluster_id} for c in cases])
    rows = frame.merge(pairs.drop(columns=["reason", "reach", "cluster_id"], errors="ignore"), on=KEY_COLUMNS,
                       how="inner")
    return rows.drop_duplicates(KEY_COLUMNS)  # two cases on one anchor: the queue shows the first


def _spanning_pairs(members: list[Record], candidates: pd.DataFrame, first: Key | None) -> list[Key]:
    """Pairs that join ``members`` into one: a maximum spanning tree of their candidate pairs (``first``
    taken before any other), then the first record of each remaining piece paired with the first record."""
    if len(members) < 2:
        return []
    graph = _graph(within(candidates, members))
    graph.add_nodes_from(members)
    if first is not None and graph.has_edge(first[:2], first[2:]):
        graph.edges[first[:2], first[2:]]["probability"] = 2.0  # above any probability: taken first
    tree = nx.maximum_spanning_tree(graph, weight="probability", algorithm="kruskal")
    chosen = [ordered_pair(*x, *y) for x, y in tree.edges()]
    pieces = sorted((sorted(p) for p in nx.connected_components(tree)), key=lambda p: p[0])
    chosen += [ordered_pair(*pieces[0][0], *piece[0]) for piece in pieces[1:]]
    return sorted(set(chosen))


def equivalent_decisions(case: ClusterCase, pairs: pd.DataFrame, choice: Choice,
                         part_a: list[Record] | None = None) -> list[tuple[Key, str]]:
    """The pairwise decisions that make the next run reproduce a decision on the whole case.

    Raises:
        BadSplit: ``part_a`` names a record outside the case or leaves one part empty.
    """
    candidates = pairs[pairs["decision"].isin(["link", "possible link", "non-link"])]
    if choice == KEEP:
        return [(k, "same") for k in _spanning_pairs(list(case.members), candidates, case.anchor)]
    side = set(case.part_a if part_a is None else part_a)
    strangers = sorted(side - set(case.members))
    if strangers:
        raise BadSplit(f"record {strangers[0][0]}/{strangers[0][1]} is not in cluster {case.cluster_id}",
                       f"{strangers[0][0]}/{strangers[0][1]}")
    a = [m for m in case.members if m in side]
    b = [m for m in case.members if m not in side]
    if not a or not b:
        raise BadSplit(f"a split of cluster {case.cluster_id} needs records in both parts")
    out = [(k, "same") for k in _spanning_pairs(a, candidates, case.anchor)]
    out += [(k, "same") for k in _spanning_pairs(b, candidates, case.anchor)]
    if (case.anchor[:2] in side) != (case.anchor[2:] in side):
        apart = case.anchor
    else:  # the reviewer moved the anchor's records to one side: the strongest candidate pair across
        inside = within(candidates, list(case.members))
        in_a = _keys(inside, "a").isin(_texts(a)).to_numpy() != _keys(inside, "b").isin(_texts(a)).to_numpy()
        across = inside[in_a].sort_values(["probability"] + KEY_COLUMNS, ascending=[False] + [True] * 4,
                                          kind="mergesort")
        apart = (tuple(str(across.iloc[0][c]) for c in KEY_COLUMNS) if len(across)  # type: ignore[assignment]
                 else ordered_pair(*a[0], *b[0]))
    return out + [(apart, "different")]


def cluster_payload(case: ClusterCase, pairs: pd.DataFrame, records: pd.DataFrame, fields: dict[str, str],
                    as_of: dict[str, str], trust: dict[str, int], decided: dict[Key, dict[str, Any]],
                    format_value: Any) -> dict[str, Any]:
    """Everything the page shows about a case: records side by side, its pairs, the proposed split."""
    side = set(case.part_a)
    shown = []
    for source, record_id in case.members:
        found = (source, record_id) in records.index
        row = records.loc[(source, record_id)] if found else None
        if isinstance(row, pd.DataFrame):
            row = row.iloc[0]
        values = {f: (format_value(row[f], t) if row is not None and f in row.index else "") for f, t in fields.items()}
        shown.append({"source": source, "record_id": record_id, "as_of": as_of.get(source, ""),
                      "trust": trust.get(source), "part": "A" if (source, record_id) in side else "B",
                      "values": values})
    inside = within(pairs, list(case.members))
    listed = []
    for row in inside.sort_values(["probability"] + KEY_COLUMNS, ascending=[False] + [True] * 4,
                                  kind="mergesort").itertuples(index=False):
        key = (row.source_a, row.record_id_a, row.source_b, row.record_id_b)
        in_a, in_b = (key[0], key[1]) in side, (key[2], key[3]) in side
        where = "inside part A" if in_a and in_b else ("inside part B" if not (in_a or in_b) else "across the split")
        standing = decided.get(key)
        listed.append({"key": dict(zip(KEY_COLUMNS, key)), "probability": float(row.probability),
                       "run_decision": str(row.decision), "where": where, "proposed_cut": key == case.anchor,
                       "decision": standing["decision"] if standing else None,
                       "decided_by": standing["reviewer"] if standing else None})
    varies = [f for f in fields if len({r["values"][f] for r in shown if r["values"][f]}) > 1]
    return {"cluster_id": case.cluster_id, "entity_ids": list(case.entity_ids), "proposal": case.proposal,
            "reason": case.reason, "anchor": dict(zip(KEY_COLUMNS, case.anchor)), "probability": case.probability,
            "records": shown, "fields": [{"name": f, "type": t, "varies": f in varies} for f, t in fields.items()],
            "pairs": listed, "part_a": len(case.part_a), "part_b": len(case.part_b)}


def as_records(frame_of_refs: list[dict[str, str]] | None) -> list[Record] | None:
    """A reviewer's part A as (source, record ID) pairs (None keeps the proposal)."""
    if frame_of_refs is None:
        return None
    return [(str(r["source"]), str(r["record_id"])) for r in frame_of_refs]
