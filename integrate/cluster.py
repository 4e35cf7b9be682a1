"""Cluster linked records into entities: connected components of the link graph, under constraints.

The links (candidate pairs decided ``link``) form a graph whose edge weights are match
probabilities. Each connected component is then checked against three rules, in this order, and
cut until it breaks none of them:

1. **Must-links** (``same`` decisions) join their two records whether or not they were linked,
   and are never cut (they have infinite capacity in every cut below).
2. **Cannot-links** keep two records apart: ``different`` decisions, and any two records of a
   source declared ``one_per_person`` (such a source never holds two records of one person).
3. **Chaining guard.** Linking is transitive inside a cluster but evidence is not: a chain
   A~B~C puts A and C together although nothing compared them favourably. When two records of
   one component were compared directly and scored clearly different (match probability below
   ``DIFFERENT_BELOW``, odds of at least 99 to 1 against), the direct comparison outweighs the
   indirect chain, so the pair is treated as a cannot-link. This is the usual reading of a
   strongly negative edge in constrained clustering (common practice; compare correlation
   clustering, Bansal, Blum & Chawla 2004, from memory, where a negative edge inside a cluster
   is a cost to remove).

A component holding a pair that breaks rule 2 or 3 is cut between the two records along its
weakest links: a minimum s-t cut with each link's capacity its match probability. The pieces
are checked again until no pair breaks a rule. Every cut is returned as a ``Split`` (with its
reason) for the run report. A ``different`` decision between two records that ``same``
decisions join cannot be honoured; they stay together and the contradiction is listed too.

The result does not depend on the order of the records: nodes and edges enter the graph in the
order of the records' (source, record ID) keys, and every choice breaks ties by that order.
"""

from __future__ import annotations

import hashlib
from collections.abc import Collection, Iterable
from dataclasses import dataclass

import networkx as nx
import numpy as np
import pandas as pd

from .columns import RECORD_ID, SOURCE
from .score import LINK, POSSIBLE

# A candidate pair below this match probability counts as "clearly different" inside a cluster
# (odds 99 to 1 against; common practice for a "clear" decision, not a published constant).
DIFFERENT_BELOW = 0.01

DIFFERENT_DECISION = "different decision"
ONE_PER_PERSON = "one record per person"
CHAINING_GUARD = "chaining guard"
CONTRADICTION = "different decision contradicts same decisions (kept together)"
SPLIT_REASONS = (DIFFERENT_DECISION, ONE_PER_PERSON, CHAINING_GUARD)

SPLIT_COLUMNS = ["reason", "detail", "source_a", "record_id_a", "source_b", "record_id_b", "probability",
                 "links_cut", "weight_cut"]
ENTITY_COLUMNS = ["entity_id", "cluster_size", "link_strength", "sources_in_cluster", "weakest_link",
                  "lowest_pair_probability", "possible_links_inside", "cut_by"]


@dataclass(frozen=True)
class Split:
    """One cut of a component (or one constraint that could not be honoured), for the run report.

    Attributes:
        kept_apart: positions of the two records the cut separates.
        reason: one of ``SPLIT_REASONS`` or ``CONTRADICTION``.
        links_cut: how many links the cut removed (0 for a contradiction).
        cut_weight: the sum of their match probabilities.
        probability: the two records' own match probability, when they were a candidate pair.
        component: number of the original component (the same for every cut of one component).
        detail: e.g. the source name for ``one record per person``.
    """

    kept_apart: tuple[int, int]
    reason: str
    links_cut: int
    cut_weight: float
    probability: float | None
    component: int
    detail: str = ""


def entity_id_for(member_keys: Iterable[str]) -> str:
    """An entity ID that depends only on the cluster's members, not on row order."""
    digest = hashlib.sha1(min(member_keys).encode("utf-8")).hexdigest()
    return "E" + digest[:10].upper()


def record_keys(records: pd.DataFrame) -> np.ndarray:
    """One text key per record, ``source`` + US + ``record ID`` (a total order on records)."""
    return (records[SOURCE].astype(str) + "\x1f" + records[RECORD_ID].astype(str)).to_numpy(dtype=object)


def _pairs(value: object) -> np.ndarray:
    """Constraint pairs as an (k, 2) int array; accepts arrays, lists of tuples or frames with i, j."""
    if value is None:
        return np.zeros((0, 2), np.int64)
    if isinstance(value, pd.DataFrame):
        value = value[["i", "j"]].to_numpy()
    array = np.asarray(value, dtype=np.int64).reshape(-1, 2)
    return array[array[:, 0] != array[:, 1]]


class _Components:
    """The link graph and the constraints, in record-key order."""

    def __init__(self, records: pd.DataFrame, scored: pd.DataFrame, must: np.ndarray, cannot: np.ndarray,
                 one_per_person: Collection[str]) -> None:
        n = len(records)
        keys = record_keys(records)
        order = np.argsort(keys, kind="stable")
        self.rank = np.empty(n, np.int64)
        self.rank[order] = np.arange(n)
        self.source = records[SOURCE].astype(str).to_numpy(dtype=object)
        self.one_per_person = sorted(set(one_per_person) & set(self.source.tolist()))
        self.graph = nx.Graph()
        self.graph.add_nodes_from(order.tolist())
        links = scored[scored["decision"] == LINK]
        edges = self._ordered(links["i"].to_numpy(), links["j"].to_numpy(), links["probability"].to_numpy())
        self.graph.add_edges_from((a, b, {"capacity": p}) for a, b, p in edges)
        # must-links: no 'capacity' attribute means infinite capacity to networkx' flow algorithms
        for a, b, _ in self._ordered(must[:, 0], must[:, 1], np.ones(len(must))):
            self.graph.add_edge(a, b, must=True)
            self.graph.edges[a, b].pop("capacity", None)
        self.group = self.rank.copy()  # must-linked records share the smallest rank of their group
        must_graph = nx.Graph()
        must_graph.add_edges_from(map(tuple, must.tolist()))
        for members in nx.connected_components(must_graph):
            self.group[list(members)] = min(self.rank[m] for m in members)
        self.cannot: dict[int, list[int]] = {}
        self.contradictions: list[tuple[int, int]] = []
        for a, b, _ in self._ordered(cannot[:, 0], cannot[:, 1], np.zeros(len(cannot))):
            if self.group[a] == self.group[b]:
                self.contradictions.append((a, b))
                continue
            self.cannot.setdefault(a, []).append(b)
            self.cannot.setdefault(b, []).append(a)
        # only pairs whose records the links join can ever be cut apart: keep just those
        joined = self._components(n)
        same_component = joined[scored["i"].to_numpy(np.int64)] == joined[scored["j"].to_numpy(np.int64)]
        scored = scored[same_component]
        clear = scored[scored["probability"] < DIFFERENT_BELOW]
        self.different: dict[int, list[tuple[int, float]]] = {}
        for a, b, p in self._ordered(clear["i"].to_numpy(), clear["j"].to_numpy(), clear["probability"].to_numpy()):
            self.different.setdefault(a, []).append((b, p))
            self.different.setdefault(b, []).append((a, p))
        pair_p = scored.set_index(["i", "j"])["probability"] if len(scored) else pd.Series(dtype=float)
        self.pair_probability = pair_p[~pair_p.index.duplicated()].to_dict()

    def _components(self, n: int) -> np.ndarray:
        """A component number per record in the link graph (singletons get their own)."""
        joined = np.arange(n, dtype=np.int64)
        for number, members in enumerate(nx.connected_components(self.graph)):
            if len(members) > 1:
                joined[list(members)] = n + number
        return joined

    def _ordered(self, i: np.ndarray, j: np.ndarray, p: np.ndarray) -> list[tuple[int, int, float]]:
        """Pairs with the lower-ranked record first, sorted by rank (the graph's insertion order)."""
        i, j = np.asarray(i, np.int64), np.asarray(j, np.int64)
        swap = self.rank[i] > self.rank[j]
        a, b = np.where(swap, j, i), np.where(swap, i, j)
        order = np.lexsort((self.rank[b], self.rank[a]))
        return list(zip(a[order].tolist(), b[order].tolist(), np.asarray(p, float)[order].tolist()))

    def probability_of(self, a: int, b: int) -> float | None:
        p = self.pair_probability.get((a, b), self.pair_probability.get((b, a)))
        return None if p is None else float(p)

    def violation(self, part: list[int]) -> tuple[int, int, str, str] | None:
        """The first pair in ``part`` (sorted by rank) that breaks a rule, with its reason."""
        inside = set(part)
        for a in part:
            for b in sorted(self.cannot.get(a, ()), key=lambda x: self.rank[x]):
                if b in inside:
                    return a, b, DIFFERENT_DECISION, ""
        for source in self.one_per_person:
            members = [x for x in part if self.source[x] == source]
            if len(members) > 1:
                first = members[0]
                other = next((x for x in members[1:] if self.group[x] != self.group[first]), None)
                if other is not None:
                    return first, other, ONE_PER_PERSON, source
        # the clearest "different" pair first (lowest probability; ties by rank)
        worst: tuple[float, int, int, int, int] | None = None
        for a in part:
            for b, p in self.different.get(a, ()):
                if b in inside and self.group[a] != self.group[b] and self.rank[a] < self.rank[b]:
                    candidate = (p, int(self.rank[a]), int(self.rank[b]), a, b)
                    if worst is None or candidate < worst:
                        worst = candidate
        return None if worst is None else (worst[3], worst[4], CHAINING_GUARD, "")

    def sorted_part(self, members: Iterable[int]) -> list[int]:
        return sorted(members, key=lambda x: self.rank[x])


def _cut(comp: _Components, members: list[int], number: int, splits: list[Split]
         ) -> list[tuple[list[int], tuple[str, ...]]]:
    """Cut one component until no pair in any piece breaks a rule; pieces with the reasons that cut them."""
    pending: list[tuple[list[int], tuple[str, ...]]] = [(members, ())]
    done: list[tuple[list[int], tuple[str, ...]]] = []
    while pending:
        part, reasons = pending.pop(0)
        found = comp.violation(part) if len(part) > 1 else None
        if found is None:
            done.append((part, reasons))
            continue
        a, b, reason, detail = found
        sub = comp.graph.subgraph(part)
        _, (side_a, side_b) = nx.minimum_cut(sub, a, b, capacity="capacity")
        cut = [(x, y) for x, y in sub.edges() if (x in side_a) != (y in side_a)]
        weight = float(sum(sub.edges[x, y].get("capacity", 0.0) for x, y in cut))
        splits.append(Split((a, b), reason, len(cut), weight, comp.probability_of(a, b), number, detail))
        label = reason if not detail else f"{reason} ({detail})"
        now = reasons if label in reasons else reasons + (label,)
        pieces = [comp.sorted_part(piece) for side in (side_a, side_b)
                  for piece in nx.connected_components(sub.subgraph(side))]
        pending.extend((piece, now) for piece in sorted(pieces, key=lambda p: comp.rank[p[0]]))
    return done


def cluster(records: pd.DataFrame, scored: pd.DataFrame, *, must_link: object = None, cannot_link: object = None,
            one_per_person: Collection[str] = ()) -> tuple[pd.DataFrame, list[Split]]:
    """Entities from linked pairs, under constraints and the chaining guard (see the module docstring).

    Args:
        records: canonical frame (positions 0..n-1 match the pair indices).
        scored: scored candidate pairs with ``i``, ``j``, ``probability``, ``decision``.
        must_link: (k, 2) record positions decided ``same``.
        cannot_link: (k, 2) record positions decided ``different``.
        one_per_person: sources that hold at most one record per person.

    Returns:
        (a frame aligned with ``records`` with ``ENTITY_COLUMNS``: the entity ID, and the cluster's
        figures repeated on each member: size, ``link_strength`` (the strongest link holding this
        record in its cluster; 1.0 for a singleton), number of sources, ``weakest_link`` (the
        weakest link the cluster hangs by: the smallest probability on its maximum spanning
        tree), ``lowest_pair_probability`` (of any candidate pair inside it),
        ``possible_links_inside`` and ``cut_by`` (reasons of the cuts that shaped it);
        every cut and contradiction as a ``Split``)

    Example:
        >>> records = pd.DataFrame({"_source": ["a", "a", "a"], "_record_id": ["1", "2", "3"]})
        >>> scored = pd.DataFrame({"i": [0, 1, 0], "j": [1, 2, 2], "probability": [0.99, 0.9, 0.001],
        ...                        "decision": ["link", "link", "non-link"]})
        >>> entities, splits = cluster(records, scored)
        >>> entities["cluster_size"].tolist(), splits[0].reason, splits[0].links_cut
        ([2, 2, 1], 'chaining guard', 1)
    """
    n = len(records)
    if n == 0:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in ENTITY_COLUMNS}, index=records.index), []
    comp = _Components(records, scored, _pairs(must_link), _pairs(cannot_link), one_per_person)
    splits: list[Split] = []
    for a, b in comp.contradictions:
        splits.append(Split((a, b), CONTRADICTION, 0, 0.0, comp.probability_of(a, b), -1))
    label = np.empty(n, dtype=np.int64)
    cut_by = np.full(n, "", dtype=object)
    number = 0
    for index, members in enumerate(nx.connected_components(comp.graph)):
        part = comp.sorted_part(members)
        pieces = [(part, ())] if len(part) < 2 else _cut(comp, part, index, splits)
        for piece, reasons in pieces:
            label[piece] = number
            cut_by[piece] = "; ".join(reasons)
            number += 1
    return _entity_frame(records, scored, comp, label, cut_by), splits


def _entity_frame(records: pd.DataFrame, scored: pd.DataFrame, comp: _Components, label: np.ndarray,
                  cut_by: np.ndarray) -> pd.DataFrame:
    """Entity IDs and per-cluster figures, repeated on every member record."""
    n = len(records)
    keys = np.asarray(record_keys(records), dtype=object)
    clusters = label.max() + 1 if n else 0
    # each cluster's smallest record key, found through the records' key ranks (no string min)
    first_rank = np.full(clusters, n, np.int64)
    np.minimum.at(first_rank, label, comp.rank)
    by_rank = np.empty(n, np.int64)
    by_rank[comp.rank] = np.arange(n)
    ids = pd.Series([entity_id_for([k]) for k in keys[by_rank[first_rank]]] if n else [], dtype=object)
    sizes = np.bincount(label, minlength=clusters)
    i, j = scored["i"].to_numpy(np.int64), scored["j"].to_numpy(np.int64)
    inside = label[i] == label[j] if len(scored) else np.zeros(0, bool)
    prob = scored["probability"].to_numpy(float)
    kept_links = inside & (scored["decision"].to_numpy() == LINK)
    strength = np.ones(n)
    if kept_links.any():
        both = pd.DataFrame({"pos": np.concatenate([i[kept_links], j[kept_links]]),
                             "p": np.concatenate([prob[kept_links], prob[kept_links]])})
        best = both.groupby("pos")["p"].max()
        strength[best.index.to_numpy()] = best.to_numpy()
    # the weakest link a cluster hangs by: smallest edge of its maximum spanning tree
    kept = nx.Graph()
    kept.add_edges_from((a, b, {"p": d.get("capacity", 1.0)}) for a, b, d in comp.graph.edges(data=True)
                        if label[a] == label[b])
    tree = [(a, p) for a, _, p in nx.maximum_spanning_tree(kept, weight="p").edges(data="p")]
    weakest = np.full(label.max() + 1 if n else 0, np.nan)
    if tree:
        tree_frame = pd.DataFrame(tree, columns=["pos", "p"])
        lowest = tree_frame.groupby(label[tree_frame["pos"].to_numpy()])["p"].min()
        weakest[lowest.index.to_numpy()] = lowest.to_numpy()
    lowest_pair = np.full(len(weakest), np.nan)
    possible = np.zeros(len(weakest), np.int64)
    if inside.any():
        low = pd.Series(prob[inside]).groupby(label[i[inside]]).min()
        lowest_pair[low.index.to_numpy()] = low.to_numpy()
        maybe = inside & (scored["decision"].to_numpy() == POSSIBLE)
        possible += np.bincount(label[i[maybe]], minlength=len(possible))
    sources = pd.Series(comp.source).groupby(label).nunique().reindex(range(len(weakest))).to_numpy()
    return pd.DataFrame({
        "entity_id": ids.reindex(label).to_numpy(),
        "cluster_size": sizes[label],
        "link_strength": strength,
        "sources_in_cluster": sources[label],
        "weakest_link": weakest[label],
        "lowest_pair_probability": lowest_pair[label],
        "possible_links_inside": possible[label],
        "cut_by": cut_by,
    }, index=records.index)


def cluster_table(entities: pd.DataFrame, records: pd.DataFrame) -> pd.DataFrame:
    """One row per entity with its figures, weakest first, so suspicious clusters sort to the top.

    Args:
        entities: the frame ``cluster`` returns (its ``entity_id`` may have been replaced by stable IDs).
        records: the canonical records it is aligned with (for the source names).
    """
    frame = entities[ENTITY_COLUMNS].drop(columns=["link_strength"]).assign(
        _source=records[SOURCE].astype(str).to_numpy())
    names = frame.groupby("entity_id")["_source"].agg(lambda s: ", ".join(sorted(set(s))))
    table = frame.drop(columns="_source").drop_duplicates("entity_id").set_index("entity_id")
    table = table.rename(columns={"cluster_size": "records", "sources_in_cluster": "sources"})
    table["source_names"] = names
    table = table.reset_index()
    table["weakest_link"] = table["weakest_link"].round(6)
    table["lowest_pair_probability"] = table["lowest_pair_probability"].round(6)
    return table.sort_values(["weakest_link", "records", "entity_id"], ascending=[True, False, True],
                             na_position="last", kind="mergesort").reset_index(drop=True)


def splits_frame(splits: list[Split], records: pd.DataFrame) -> pd.DataFrame:
    """Every cut (and contradiction) as a table: why, the two records kept apart, what was cut."""
    source = records[SOURCE].astype(str).to_numpy()
    record_id = records[RECORD_ID].astype(str).to_numpy()
    return pd.DataFrame({
        "reason": [s.reason for s in splits],
        "detail": [s.detail for s in splits],
        "source_a": [source[s.kept_apart[0]] for s in splits],
        "record_id_a": [record_id[s.kept_apart[0]] for s in splits],
        "source_b": [source[s.kept_apart[1]] for s in splits],
        "record_id_b": [record_id[s.kept_apart[1]] for s in splits],
        "probability": [s.probability for s in splits],
        "links_cut": [s.links_cut for s in splits],
        "weight_cut": [round(s.cut_weight, 6) for s in splits],
    }, columns=SPLIT_COLUMNS)
