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
weakest links: a minimum s-t cut with each link's capacity the evidence it carries, -log(1 - p)
for match probability p. Evidence adds up along parallel paths the way log-odds do, so one link
at 0.999 (capacity 6.9) outweighs two at 0.985 and 0.85 (4.2 + 1.9), where plain probabilities
(0.999 against 1.835) would cut the single strong link instead (common practice: weights of
evidence are additive, probabilities are not). The pieces
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
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components, minimum_spanning_tree

from .columns import RECORD_ID, SOURCE
from .grouped import join_by_group
from .score import LINK, POSSIBLE

# A candidate pair below this match probability counts as "clearly different" inside a cluster
# (odds 99 to 1 against; common practice for a "clear" decision, not a published constant).
DIFFERENT_BELOW = 0.01

# Compared pairs' log-odds are clipped to this (a probability of 1 - 1e-9 at most), and a cut is
# solved exactly by branch and bound for components of at most EXACT_UP_TO must-link groups.
EVIDENCE_LIMIT = 20.0
EXACT_UP_TO = 10
# A compared pair at or above this probability is "near certain": a cut should never separate it.
NEAR_CERTAIN = 0.99

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


def _component_labels(n: int, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """A component number per record of the graph with edges a-b (singletons get their own)."""
    graph = coo_matrix((np.ones(len(a)), (a, b)), shape=(n, n))
    return connected_components(graph, directed=False)[1].astype(np.int64)


class _Components:
    """The link graph and the constraints, in record-key order.

    Components come from sparse connected components; a networkx graph is built only for a
    component that breaks a rule and must be cut.
    """

    def __init__(self, records: pd.DataFrame, scored: pd.DataFrame, must: np.ndarray, cannot: np.ndarray,
                 one_per_person: Collection[str]) -> None:
        n = len(records)
        keys = record_keys(records)
        order = np.argsort(keys, kind="stable")
        self.rank = np.empty(n, np.int64)
        self.rank[order] = np.arange(n)
        self.source = records[SOURCE].astype(str).to_numpy(dtype=object)
        self.one_per_person = sorted(set(one_per_person) & set(self.source.tolist()))
        is_link = (scored["decision"] == LINK).to_numpy()
        self.links = self._ordered(scored["i"].to_numpy()[is_link], scored["j"].to_numpy()[is_link],
                                   scored["probability"].to_numpy()[is_link])
        self.must = self._ordered(must[:, 0], must[:, 1], np.ones(len(must)))
        # must-linked records share the smallest rank of their group
        must_group = _component_labels(n, must[:, 0], must[:, 1])
        smallest = np.full(must_group.max(initial=0) + 1, n, np.int64)
        np.minimum.at(smallest, must_group, self.rank)
        self.group = smallest[must_group]
        self.cannot: dict[int, list[int]] = {}
        self.contradictions: list[tuple[int, int]] = []
        for a, b, _ in zip(*(x.tolist() for x in self._ordered(cannot[:, 0], cannot[:, 1], np.zeros(len(cannot))))):
            if self.group[a] == self.group[b]:
                self.contradictions.append((a, b))
                continue
            self.cannot.setdefault(a, []).append(b)
            self.cannot.setdefault(b, []).append(a)
        self.component, self.count = self._components(n)
        self._links_index, self._must_index = self._by_component(self.links), self._by_component(self.must)
        # only pairs whose records the links join can ever be cut apart: keep just those
        i, j = scored["i"].to_numpy(np.int64), scored["j"].to_numpy(np.int64)
        same_component = self.component[i] == self.component[j]
        i, j, p = i[same_component], j[same_component], scored["probability"].to_numpy(float)[same_component]
        clear = p < DIFFERENT_BELOW
        self.breaks_a_rule = self._suspects(i[clear], j[clear])
        # the look-ups below serve only components that may be cut (and contradictions): the
        # others need no Python object per pair
        needed = self.breaks_a_rule.copy()
        for a, _ in self.contradictions:
            needed[self.component[a]] = True
        keep = needed[self.component[i]]
        i, j, p, clear = i[keep], j[keep], p[keep], clear[keep]
        self.different: dict[int, list[tuple[int, float]]] = {}
        for a, b, q in zip(*(x.tolist() for x in self._ordered(i[clear], j[clear], p[clear]))):
            self.different.setdefault(a, []).append((b, q))
            self.different.setdefault(b, []).append((a, q))
        # those components' compared pairs, each (i, j) once (its first row), found by binary
        # search: a dict keyed by pair cost a Python object per pair, and a component that may be
        # cut can hold millions of pairs on a large input
        self._n = n
        self._pair_code, first = np.unique(i * n + j, return_index=True)
        self._pair_p = p[first]
        # ... and by component, each component's in the order of its records' ranks (i, then j)
        i, j, p = i[first], j[first], self._pair_p
        order = np.lexsort((self.rank[j], self.rank[i], self.component[i]))
        self._cut_pairs = (i[order], j[order], p[order])
        self._cut_component = self.component[i[order]]

    def _components(self, n: int) -> tuple[np.ndarray, int]:
        """Components of links and must-links, numbered in the order of their first record by rank."""
        labels = _component_labels(n, np.concatenate([self.links[0], self.must[0]]),
                                   np.concatenate([self.links[1], self.must[1]]))
        count = int(labels.max(initial=-1)) + 1
        first = np.full(count, n, np.int64)
        np.minimum.at(first, labels, self.rank)
        number = np.empty(count, np.int64)
        number[np.argsort(first)] = np.arange(count)
        return number[labels], count

    def _suspects(self, clear_i: np.ndarray, clear_j: np.ndarray) -> np.ndarray:
        """Per component, whether ``violation`` can find anything in it (all others stay whole)."""
        found = np.zeros(self.count, bool)
        comp, group = self.component, self.group
        cannot = np.array([(a, b) for a, others in self.cannot.items() for b in others], np.int64).reshape(-1, 2)
        found[comp[cannot[:, 0]][comp[cannot[:, 0]] == comp[cannot[:, 1]]]] = True
        found[comp[clear_i][group[clear_i] != group[clear_j]]] = True
        for source in self.one_per_person:
            members = np.flatnonzero(self.source == source)
            groups = np.unique(np.column_stack([comp[members], group[members]]), axis=0)
            found |= np.bincount(groups[:, 0], minlength=self.count) > 1
        return found

    def _ordered(self, i: np.ndarray, j: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Pairs with the lower-ranked record first, sorted by rank (a graph's insertion order)."""
        i, j = np.asarray(i, np.int64), np.asarray(j, np.int64)
        swap = self.rank[i] > self.rank[j]
        a, b = np.where(swap, j, i), np.where(swap, i, j)
        order = np.lexsort((self.rank[b], self.rank[a]))
        return a[order], b[order], np.asarray(p, float)[order]

    def members(self) -> dict[int, list[int]]:
        """Records of each component that breaks a rule, sorted by rank."""
        wanted = np.flatnonzero(self.breaks_a_rule[self.component])
        wanted = wanted[np.lexsort((self.rank[wanted], self.component[wanted]))]
        out: dict[int, list[int]] = {}
        for record, number in zip(wanted.tolist(), self.component[wanted].tolist()):
            out.setdefault(number, []).append(record)
        return out

    def graph_of(self, members: list[int]) -> nx.Graph:
        """The links and must-links of one component, entered in rank order."""
        number = self.component[members[0]]
        graph = nx.Graph()
        graph.add_nodes_from(members)
        a, b, p = self._edges_of(self.links, self._links_index, number)
        graph.add_edges_from((x, y, {"capacity": _evidence(q), "probability": q}) for x, y, q in zip(a, b, p))
        # must-links: no 'capacity' attribute means infinite capacity to networkx' flow algorithms
        a, b, _ = self._edges_of(self.must, self._must_index, number)
        for x, y in zip(a, b):
            graph.add_edge(x, y, must=True)
            graph.edges[x, y].pop("capacity", None)
        return graph

    def _edges_of(self, edges: tuple[np.ndarray, np.ndarray, np.ndarray], index: tuple[np.ndarray, np.ndarray],
                  number: int) -> tuple[list[int], list[int], list[float]]:
        """The edges of component ``number``, in rank order; ``index`` is (their order by component,
        the sorted component numbers), so finding them is a binary search."""
        order, sorted_component = index
        span = order[np.searchsorted(sorted_component, number):np.searchsorted(sorted_component, number, "right")]
        return edges[0][span].tolist(), edges[1][span].tolist(), edges[2][span].tolist()

    def _by_component(self, edges: tuple[np.ndarray, np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        component = self.component[edges[0]]
        order = np.argsort(component, kind="stable")  # stable: rank order within a component
        return order, component[order]

    def probability_of(self, a: int, b: int) -> float | None:
        """The compared pair (a, b)'s match probability, else (b, a)'s; None when not compared
        (or not in a component that may be cut)."""
        for key in (a * self._n + b, b * self._n + a):
            at = int(np.searchsorted(self._pair_code, key))
            if at < len(self._pair_code) and self._pair_code[at] == key:
                return float(self._pair_p[at])
        return None

    def pairs_of(self, number: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The compared pairs (i, j, probability) inside component ``number`` (one that may be
        cut), ordered by the rank of i, then of j."""
        span = slice(int(np.searchsorted(self._cut_component, number)),
                     int(np.searchsorted(self._cut_component, number, "right")))
        return self._cut_pairs[0][span], self._cut_pairs[1][span], self._cut_pairs[2][span]

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


def _evidence(p: float) -> float:
    """A link's capacity in a cut: -log(1 - p), positive for any p > 0 (see the module docstring)."""
    return float(-np.log(1.0 - min(max(p, 1e-12), 1.0 - 1e-12)))


def _log_odds(p: np.ndarray) -> np.ndarray:
    """Weight of evidence of a compared pair, log(p / (1 - p)), clipped to +-EVIDENCE_LIMIT."""
    q = np.clip(np.asarray(p, float), 1e-9, 1.0 - 1e-9)
    return np.clip(np.log(q) - np.log1p(-q), -EVIDENCE_LIMIT, EVIDENCE_LIMIT)


class _Problem:
    """One component to cut, on its must-link groups ("units"): summed pair weights and hard conflicts.

    ``weight`` is a sparse symmetric matrix of summed log-odds between units (compared pairs only);
    ``conflict`` holds, per unit, the units it may not share a part with.
    """

    def __init__(self, comp: _Components, members: list[int]) -> None:
        groups = np.array([comp.group[x] for x in members], np.int64)
        unique, unit = np.unique(groups, return_inverse=True)  # group = smallest rank: rank order
        self.unit = unit.reshape(-1)
        self.k = len(unique)
        position = {x: u for x, u in zip(members, self.unit.tolist())}
        # every compared pair of the component between two units, in the members' (rank) order
        x, y, q = comp.pairs_of(int(comp.component[members[0]]))
        unit_x, unit_y = self.unit[_places(members, x)], self.unit[_places(members, y)]
        apart = unit_x != unit_y
        a_arr, b_arr = unit_x[apart].astype(np.int64), unit_y[apart].astype(np.int64)
        w = _log_odds(q[apart]) if apart.any() else np.zeros(0)
        matrix = coo_matrix((np.r_[w, w], (np.r_[a_arr, b_arr], np.r_[b_arr, a_arr])), shape=(self.k, self.k))
        self.weight = matrix.tocsr()
        self.weight.sum_duplicates()
        self.conflict: list[set[int]] = [set() for _ in range(self.k)]
        inside = set(members)
        for x in members:
            for y in comp.cannot.get(x, ()):
                if y in inside:
                    self._forbid(position[x], position[y])
            for y, _ in comp.different.get(x, ()):
                if y in inside:
                    self._forbid(position[x], position[y])
        for source in comp.one_per_person:
            units = sorted({position[x] for x in members if comp.source[x] == source})
            for s in range(len(units)):
                for t in range(s + 1, len(units)):
                    self._forbid(units[s], units[t])

    def _forbid(self, u: int, v: int) -> None:
        if u != v:
            self.conflict[u].add(v)
            self.conflict[v].add(u)

    def row(self, u: int) -> tuple[np.ndarray, np.ndarray]:
        start, end = self.weight.indptr[u], self.weight.indptr[u + 1]
        return self.weight.indices[start:end], self.weight.data[start:end]

    def score(self, part: np.ndarray) -> float:
        """Sum of the weights of the pairs kept together (each pair once)."""
        coo = self.weight.tocoo()
        return float(coo.data[part[coo.row] == part[coo.col]].sum() / 2)

    def heuristic(self) -> np.ndarray:
        """Greedy pivots on the strongest evidence, then single-unit moves while any improves the score."""
        part = np.full(self.k, -1, np.int64)
        members: list[set[int]] = []
        strongest = np.zeros(self.k)
        coo = self.weight.tocoo()
        np.maximum.at(strongest, coo.row, coo.data)
        for pivot in np.argsort(-strongest, kind="stable").tolist():
            if part[pivot] >= 0:
                continue
            part[pivot] = len(members)
            members.append({pivot})
            blocked = set(self.conflict[pivot])
            cols, vals = self.row(pivot)
            for v in cols[np.argsort(-vals, kind="stable")][np.sort(vals)[::-1] > 0].tolist():
                if part[v] < 0 and v not in blocked:
                    part[v] = part[pivot]
                    members[-1].add(v)
                    blocked |= self.conflict[v]
        return self._improve(part)

    def _improve(self, part: np.ndarray, sweeps: int = 50) -> np.ndarray:
        part = part.copy()
        for _ in range(sweeps):
            moved = False
            for u in range(self.k):
                cols, vals = self.row(u)
                gain = pd.Series(vals).groupby(part[cols]).sum() if len(cols) else pd.Series(dtype=float)
                here = float(gain.get(part[u], 0.0))
                blocked = {int(part[v]) for v in self.conflict[u]}
                # a part of its own scores 0.0 (only if u is not alone already)
                alone = (part == part[u]).sum() == 1
                best, target = (-np.inf, None) if alone else (0.0, int(part.max()) + 1)
                for label, value in gain.items():
                    if label != part[u] and label not in blocked and value > best + 1e-9:
                        best, target = float(value), int(label)
                if target is not None and best > here + 1e-9:
                    part[u] = target
                    moved = True
            if not moved:
                break
        return part

    def exact(self, start: np.ndarray) -> np.ndarray:
        """Branch and bound over all partitions that respect the conflicts, starting from ``start``'s
        score; the bound adds every remaining positive weight."""
        dense = self.weight.toarray()
        k = self.k
        positive_rest = np.array([np.clip(dense[t:, :], 0, None).sum() - np.clip(dense[t:, t:], 0, None).sum() / 2
                                  for t in range(k)] + [0.0])
        best = [self.score(start), start.copy()]
        part = np.full(k, -1, np.int64)

        def place(t: int, parts: int, total: float) -> None:
            if total + positive_rest[t] <= best[0] + 1e-12:
                return
            if t == k:
                best[0], best[1] = total, part.copy()
                return
            earlier = part[:t]
            for label in range(parts + 1):
                if label < parts and any(part[v] == label for v in self.conflict[t] if v < t):
                    continue
                part[t] = label
                place(t + 1, max(parts, label + 1), total + float(dense[t, :t][earlier == label].sum()))
            part[t] = -1

        place(0, 0, 0.0)
        return best[1]

    def solve(self) -> np.ndarray:
        start = self.heuristic()
        return self.exact(start) if self.k <= EXACT_UP_TO else start


def _places(members: list[int], records: np.ndarray) -> np.ndarray:
    """Each of ``records``' place in ``members`` (all of them are members)."""
    array = np.asarray(members, np.int64)
    by_record = np.argsort(array, kind="stable")
    return by_record[np.searchsorted(array[by_record], records)]


def _strongest_between(comp: _Components, members: list[int], number: int, piece_of: dict[int, int]
                       ) -> dict[tuple[int, int], tuple[int, int]]:
    """Per two pieces s < t of a cut component, the compared pair (a in s, b in t) with the
    highest probability (ties: a's rank, then b's), where ``comp.probability_of(a, b)`` gives the
    probability: what ``_why_apart`` reports when no rule explains the cut."""
    x, y, q = comp.pairs_of(number)
    piece = np.array([piece_of[m] for m in members], np.int64)
    px, py = piece[_places(members, x)], piece[_places(members, y)]
    # (a, b) = (x, y) where x lies in the lower piece; else (y, x), whose probability is the
    # stored (y, x) pair's if there is one (then that row stands for it already)
    forward = px < py
    backward = px > py
    if backward.any():
        reverse = y[backward] * comp._n + x[backward]
        at = np.minimum(np.searchsorted(comp._pair_code, reverse), len(comp._pair_code) - 1)
        backward[np.flatnonzero(backward)[comp._pair_code[at] == reverse]] = False
    a = np.concatenate([x[forward], y[backward]])
    b = np.concatenate([y[forward], x[backward]])
    p = np.concatenate([q[forward], q[backward]])
    s = np.concatenate([px[forward], py[backward]])
    t = np.concatenate([py[forward], px[backward]])
    order = np.lexsort((comp.rank[b], comp.rank[a], -p, t, s))
    a, b, s, t = a[order], b[order], s[order], t[order]
    first = np.flatnonzero(np.r_[True, (s[1:] != s[:-1]) | (t[1:] != t[:-1])]) if len(s) else np.zeros(0, np.int64)
    return {(int(s[k]), int(t[k])): (int(a[k]), int(b[k])) for k in first.tolist()}


def _cut(comp: _Components, graph: nx.Graph, members: list[int], number: int, splits: list[Split]
         ) -> list[tuple[list[int], tuple[str, ...]]]:
    """Cut one component into the partition with the most evidence kept together (see the module
    docstring); pieces with the reasons that cut them."""
    problem = _Problem(comp, members)
    unit_part = problem.solve()
    part_of = dict(zip(members, unit_part[problem.unit].tolist()))
    pieces: list[list[int]] = []
    for label in sorted(set(part_of.values())):
        side = [x for x in members if part_of[x] == label]
        pieces.extend(comp.sorted_part(piece) for piece in nx.connected_components(graph.subgraph(side)))
    pieces.sort(key=lambda p: comp.rank[p[0]])
    piece_of = {x: n for n, piece in enumerate(pieces) for x in piece}
    across: dict[tuple[int, int], list[tuple[int, int]]] = {}
    for x, y in graph.edges():
        s, t = piece_of[x], piece_of[y]
        if s != t:
            across.setdefault((min(s, t), max(s, t)), []).append((x, y))
    reasons: list[set[str]] = [set() for _ in pieces]
    strongest = _strongest_between(comp, members, number, piece_of) if across else {}
    for (s, t), cut in sorted(across.items()):
        a, b, reason, detail = _why_apart(comp, pieces[s], pieces[t], strongest.get((s, t)))
        weight = float(sum(graph.edges[x, y].get("probability", 0.0) for x, y in cut))
        splits.append(Split((a, b), reason, len(cut), weight, comp.probability_of(a, b), number, detail))
        label = reason if not detail else f"{reason} ({detail})"
        reasons[s].add(label)
        reasons[t].add(label)
    return [(piece, tuple(sorted(r))) for piece, r in zip(pieces, reasons)]


def _why_apart(comp: _Components, one: list[int], other: list[int], strongest: tuple[int, int] | None
               ) -> tuple[int, int, str, str]:
    """The pair that explains why two pieces are apart: a different decision, then one record per
    person, then the clearest "different" pair; else (kept apart by weaker evidence) the strongest
    compared pair between them (``strongest``, from ``_strongest_between``), reported as the
    chaining guard."""
    second = set(other)
    for a in one:
        for b in sorted(comp.cannot.get(a, ()), key=lambda x: comp.rank[x]):
            if b in second:
                return a, b, DIFFERENT_DECISION, ""
    for source in comp.one_per_person:
        a = next((x for x in one if comp.source[x] == source), None)
        b = next((x for x in other if comp.source[x] == source), None)
        if a is not None and b is not None:
            return a, b, ONE_PER_PERSON, source
    worst: tuple[float, int, int, int, int] | None = None
    for a in one:
        for b, p in comp.different.get(a, ()):
            if b in second:
                candidate = (p, int(comp.rank[a]), int(comp.rank[b]), a, b)
                worst = candidate if worst is None or candidate < worst else worst
    if worst is not None:
        return worst[3], worst[4], CHAINING_GUARD, ""
    if strongest is None:
        return one[0], other[0], CHAINING_GUARD, ""
    return strongest[0], strongest[1], CHAINING_GUARD, ""


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
    label = comp.component.copy()  # a component that breaks no rule is one cluster as it stands
    cut_by = np.full(n, "", dtype=object)
    number = comp.count
    for index, members in comp.members().items():
        for piece, reasons in _cut(comp, comp.graph_of(members), members, index, splits):
            label[piece] = number
            cut_by[piece] = "; ".join(reasons)
            number += 1
    label = np.unique(label, return_inverse=True)[1].reshape(-1)
    return _entity_frame(records, scored, comp, label, cut_by), splits


def _group_extreme(values: np.ndarray, groups: np.ndarray, count: int, func: np.ufunc) -> np.ndarray:
    """``func`` (np.minimum or np.maximum) of ``values`` per group number; NaN for an empty group."""
    out = np.full(count, np.inf if func is np.minimum else -np.inf)
    func.at(out, groups, values)
    return np.where(np.isinf(out), np.nan, out)


def _weakest_links(comp: _Components, label: np.ndarray, clusters: int) -> np.ndarray:
    """The weakest link each cluster hangs by: the smallest probability on a maximum spanning tree
    of its links and must-links (a must-link counts 1.0). Every maximum spanning tree has the
    same smallest edge, so the figure does not depend on how ties are broken."""
    n = len(label)
    a = np.concatenate([comp.links[0], comp.must[0]])
    b = np.concatenate([comp.links[1], comp.must[1]])
    p = np.concatenate([comp.links[2], np.ones(len(comp.must[0]))])
    inside = label[a] == label[b]
    low, high, p = np.minimum(a, b)[inside], np.maximum(a, b)[inside], p[inside]
    # one edge per pair of records, the must-link over the link
    order = np.lexsort((-p, low * n + high))
    low, high, p = low[order], high[order], p[order]
    first = np.r_[True, (low[1:] != low[:-1]) | (high[1:] != high[:-1])] if len(low) else np.zeros(0, bool)
    low, high, p = low[first], high[first], p[first]
    # a minimum spanning tree over the links' strength ranks (1 = strongest) is a maximum one over p
    by_strength = np.argsort(-p, kind="stable")
    rank = np.empty(len(p))
    rank[by_strength] = np.arange(1, len(p) + 1)
    tree = minimum_spanning_tree(coo_matrix((rank, (low, high)), shape=(n, n))).tocoo()
    tree_p = p[by_strength][tree.data.astype(np.int64) - 1]
    return _group_extreme(tree_p, label[tree.row], clusters, np.minimum)


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
    ids = np.array([entity_id_for([k]) for k in keys[by_rank[first_rank]]], dtype=object)
    sizes = np.bincount(label, minlength=clusters)
    i, j = scored["i"].to_numpy(np.int64), scored["j"].to_numpy(np.int64)
    inside = label[i] == label[j]
    prob = scored["probability"].to_numpy(float)
    decision = scored["decision"].to_numpy()
    kept_links = inside & (decision == LINK)
    strength = _group_extreme(np.concatenate([prob[kept_links]] * 2),
                              np.concatenate([i[kept_links], j[kept_links]]), n, np.maximum)
    strength = np.where(np.isnan(strength), 1.0, strength)
    lowest_pair = _group_extreme(prob[inside], label[i[inside]], clusters, np.minimum)
    possible = np.bincount(label[i[inside & (decision == POSSIBLE)]], minlength=clusters)
    source_codes = pd.factorize(comp.source)[0]
    cluster_sources = np.unique(label * (source_codes.max(initial=0) + 1) + source_codes)
    sources = np.bincount(cluster_sources // (source_codes.max(initial=0) + 1), minlength=clusters)
    return pd.DataFrame({
        "entity_id": ids[label],
        "cluster_size": sizes[label],
        "link_strength": strength,
        "sources_in_cluster": sources[label],
        "weakest_link": _weakest_links(comp, label, clusters)[label],
        "lowest_pair_probability": lowest_pair[label],
        "possible_links_inside": possible[label],
        "cut_by": cut_by,
    }, index=records.index)


def near_certain_pairs_cut(scored: pd.DataFrame, entity_ids: object, *, at_least: float = NEAR_CERTAIN) -> int:
    """How many compared pairs with a direct match probability of at least ``at_least`` ended in two
    different entities (a cut that separates such a pair dropped near-certain evidence; goal: 0)."""
    labels = pd.factorize(np.asarray(entity_ids, dtype=object))[0]
    i, j = scored["i"].to_numpy(np.int64), scored["j"].to_numpy(np.int64)
    strong = scored["probability"].to_numpy(float) >= at_least
    return int((labels[i[strong]] != labels[j[strong]]).sum())


def cluster_table(entities: pd.DataFrame, records: pd.DataFrame) -> pd.DataFrame:
    """One row per entity with its figures, weakest first, so suspicious clusters sort to the top.

    Args:
        entities: the frame ``cluster`` returns (its ``entity_id`` may have been replaced by stable IDs).
        records: the canonical records it is aligned with (for the source names).
    """
    frame = entities[ENTITY_COLUMNS].drop(columns=["link_strength"]).assign(
        _source=records[SOURCE].astype(str).to_numpy())
    # each entity's distinct source names, sorted and joined (no Python call per entity)
    distinct = frame[["entity_id", "_source"]].drop_duplicates()
    names = join_by_group(distinct["_source"], distinct["entity_id"], ", ", sort_labels=True)
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
