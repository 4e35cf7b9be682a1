"""Cluster linked records into entities: connected components of the link graph (networkx).

A component is judged as a whole, not only pair by pair: when two of its records were compared
and found clearly different (a candidate pair with a match probability below
``DIFFERENT_BELOW``), the component holds a chain such as A~B~C where A and C are different
people. It is then cut between those two records along its weakest links (a minimum cut, with
each link's capacity its match probability) until no such pair is left in one cluster.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import networkx as nx
import numpy as np
import pandas as pd

from .columns import RECORD_ID, SOURCE
from .score import LINK

# A candidate pair below this match probability counts as "clearly different" inside a cluster.
DIFFERENT_BELOW = 0.01


@dataclass(frozen=True)
class Split:
    """One cut made by the chaining guard (for the run report)."""

    kept_apart: tuple[int, int]
    links_cut: int
    probability: float


def entity_id_for(member_keys: list[str]) -> str:
    """An entity ID that depends only on the cluster's members, not on row order."""
    digest = hashlib.sha1(min(member_keys).encode("utf-8")).hexdigest()
    return "E" + digest[:10].upper()


def _split_component(graph: nx.Graph, members: set[int], different: dict[int, list[tuple[int, float]]],
                     splits: list[Split]) -> list[set[int]]:
    """Cut a component until no two of its records are a clearly-different pair."""
    pending = [members]
    done: list[set[int]] = []
    while pending:
        part = pending.pop()
        violation = None
        for a in sorted(part):
            for b, p in different.get(a, ()):
                if b in part:
                    violation = (a, b, p)
                    break
            if violation:
                break
        if violation is None:
            done.append(part)
            continue
        a, b, p = violation
        sub = graph.subgraph(part)
        _, (side_a, side_b) = nx.minimum_cut(sub, a, b, capacity="weight")
        cut = sum(1 for x, y in sub.edges() if (x in side_a) != (y in side_a))
        splits.append(Split((a, b), cut, p))
        for side in (side_a, side_b):
            pending.extend(set(c) for c in nx.connected_components(sub.subgraph(side)))
    return done


def cluster(records: pd.DataFrame, scored: pd.DataFrame) -> tuple[pd.DataFrame, list[Split]]:
    """Entities from linked pairs, with the chaining guard applied.

    Args:
        records: canonical frame (positions 0..n-1 match the pair indices).
        scored: scored candidate pairs with ``i``, ``j``, ``probability``, ``decision``.

    Returns:
        (a frame aligned with ``records``: ``entity_id``, ``cluster_size`` and ``link_strength``
        (the probability of the strongest link holding the record in its cluster; 1.0 for
        singletons); the splits the guard made)
    """
    n = len(records)
    links = scored[scored["decision"] == LINK]
    graph = nx.Graph()
    graph.add_nodes_from(range(n))
    graph.add_weighted_edges_from(
        zip(links["i"].to_numpy().tolist(), links["j"].to_numpy().tolist(),
            links["probability"].to_numpy().tolist())
    )
    clear = scored[scored["probability"] < DIFFERENT_BELOW]
    different: dict[int, list[tuple[int, float]]] = {}
    for a, b, p in zip(clear["i"].tolist(), clear["j"].tolist(), clear["probability"].tolist()):
        different.setdefault(a, []).append((b, p))
        different.setdefault(b, []).append((a, p))
    label = np.empty(n, dtype=np.int64)
    splits: list[Split] = []
    number = 0
    for members in nx.connected_components(graph):
        parts = [members] if len(members) < 3 else _split_component(graph, members, different, splits)
        for part in parts:
            label[list(part)] = number
            number += 1
    keys = (records[SOURCE].astype(str) + "\x1f" + records[RECORD_ID].astype(str)).to_numpy()
    first_key = pd.Series(keys).groupby(label).min()
    ids = first_key.map(lambda k: entity_id_for([k]))
    sizes = np.bincount(label)
    strength = np.ones(n)
    kept = links[label[links["i"].to_numpy()] == label[links["j"].to_numpy()]]
    if len(kept):
        both = pd.concat([
            pd.DataFrame({"pos": kept["i"].to_numpy(), "p": kept["probability"].to_numpy()}),
            pd.DataFrame({"pos": kept["j"].to_numpy(), "p": kept["probability"].to_numpy()}),
        ])
        best = both.groupby("pos")["p"].max()
        strength[best.index.to_numpy()] = best.to_numpy()
    entities = pd.DataFrame(
        {"entity_id": ids.reindex(label).to_numpy(), "cluster_size": sizes[label], "link_strength": strength},
        index=records.index,
    )
    return entities, splits
