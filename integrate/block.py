"""Blocking: records sharing every key of a blocking rule become candidate pairs.

Candidate pairs are a frame of integer record positions ``i < j`` plus a bit mask of the rules
that produced them. Keys are visible columns, computed once per distinct value.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import jellyfish
import numpy as np
import pandas as pd

from .mapping.spec import BlockingRule, CanonicalSchema
from .standardise import DAY, MONTH, ROOT_SUFFIX, YEAR
from .text_normalise import map_distinct

log = logging.getLogger(__name__)

PAIR_COLUMNS = ("i", "j", "rules")
SORTED_WINDOW = 5  # sorted-neighbourhood window of the default rules (records compared with the next 4)


@dataclass
class BlockingReport:
    """What blocking did, for the run report and ``integrate blocking``."""

    rules: list[str]
    pairs_per_rule: dict[str, int]
    unique_per_rule: dict[str, int]
    largest_blocks: dict[str, list[tuple[str, int]]]
    skipped_blocks: list[tuple[str, str, int]] = field(default_factory=list)
    candidate_pairs: int = 0
    all_pairs: int = 0

    @property
    def reduction_ratio(self) -> float:
        """1 - candidates / all pairs (Christen 2012, ch. 7)."""
        return 1.0 - self.candidate_pairs / self.all_pairs if self.all_pairs else 0.0


def _key_part(prepared: pd.DataFrame, expression: str) -> pd.Series:
    """Evaluate one key expression ``field[+field...][:transform]`` on the prepared frame."""
    names, _, transform = expression.partition(":")
    fields = names.split("+")
    for name in fields:
        if name not in prepared.columns:
            raise KeyError(name)
    transform = transform or "exact"
    if transform == "year":
        return prepared[fields[0] + YEAR].astype("string")
    if transform == "month_day":
        return (prepared[fields[0] + MONTH].astype("string") + "-" + prepared[fields[0] + DAY].astype("string"))
    if transform == "root":
        return prepared[fields[0] + ROOT_SUFFIX]
    if transform == "roots" and len(fields) == 2:
        # the formal forms of two names' first words in sorted order: 'Jimmy Roberts' and
        # 'Roberts, James' share 'james roberts' (a swap with a nickname on top)
        a, b = (prepared[f + ROOT_SUFFIX].astype("string") for f in fields)
        return a.where(a < b, b) + " " + b.where(a < b, a)
    if len(fields) > 1:
        base = prepared[fields[0]].astype("string").fillna("")
        for name in fields[1:]:
            base = base + " " + prepared[name].astype("string").fillna("")
        base = base.str.strip().replace("", pd.NA)
    else:
        base = prepared[fields[0]].astype("string")
        if fields[0] + YEAR in prepared.columns and transform == "exact":
            # an exact date key uses full dates only: a year-only value would block a whole year
            base = base.where(prepared[fields[0] + DAY].notna(), pd.NA)
    if transform == "exact":
        return base
    if transform == "soundex":
        return map_distinct(base, lambda v: jellyfish.soundex(v.replace(" ", "")))
    if transform == "nysiis":
        return map_distinct(base, lambda v: jellyfish.nysiis(v.replace(" ", "")))
    if transform == "sounds":
        # sorted Soundex codes of every word: catches swapped given/family names despite a typo
        return map_distinct(base, lambda v: " ".join(sorted({jellyfish.soundex(t) for t in v.split()})))
    if transform == "initials":
        # sorted first letters of every word: survives typos after the first letter and swaps
        return map_distinct(base, lambda v: "".join(sorted(t[0] for t in v.split())))
    if transform == "tokens":
        return map_distinct(base, lambda v: " ".join(sorted(v.split())))
    if transform.startswith("first") and transform[5:].isdigit():
        return base.str.replace(" ", "", regex=False).str.slice(0, int(transform[5:]))
    if transform.startswith("last") and transform[4:].isdigit():
        return base.str.replace(" ", "", regex=False).str.slice(-int(transform[4:]))
    raise ValueError(f"unknown key transform '{transform}'")


def rule_key(prepared: pd.DataFrame, rule: BlockingRule) -> pd.Series:
    """The blocking key of every record under one rule (NA when any part is missing)."""
    parts = [_key_part(prepared, k) for k in rule.keys]
    key = parts[0].astype("string")
    for part in parts[1:]:
        key = key + "\x1f" + part.astype("string")
    return key


def _pairs_for_key(key: pd.Series, max_block: int) -> tuple[np.ndarray, np.ndarray, pd.Series]:
    codes, uniques = pd.factorize(key, use_na_sentinel=True)
    sizes = np.bincount(codes[codes >= 0], minlength=len(uniques))
    keep = (codes >= 0)
    big = sizes > max_block
    if big.any():
        keep &= ~big[np.where(codes >= 0, codes, 0)]
    frame = pd.DataFrame({"code": codes[keep], "pos": np.flatnonzero(keep)})
    frame = frame[sizes[frame["code"].to_numpy()] > 1]
    joined = frame.merge(frame, on="code", suffixes=("_a", "_b"))
    joined = joined[joined["pos_a"] < joined["pos_b"]]
    big_blocks = pd.Series(sizes[big], index=pd.Index(uniques[big], dtype="object")).sort_values(ascending=False)
    return joined["pos_a"].to_numpy(np.int64), joined["pos_b"].to_numpy(np.int64), big_blocks


def _neighbour_pairs(key: pd.Series, window: int) -> tuple[np.ndarray, np.ndarray]:
    """Sorted neighbourhood (Hernández & Stolfo 1995): pairs within ``window`` places in key order."""
    present = np.flatnonzero(key.notna().to_numpy())
    if len(present) < 2:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    order = present[np.argsort(key.to_numpy(dtype=object)[present].astype(str), kind="mergesort")]
    left, right = [], []
    for step in range(1, window):
        left.append(order[:-step])
        right.append(order[step:])
    i = np.concatenate(left)
    j = np.concatenate(right)
    return np.minimum(i, j).astype(np.int64), np.maximum(i, j).astype(np.int64)


def block(
    prepared: pd.DataFrame,
    rules: list[BlockingRule],
    *,
    groups: pd.Series | None = None,
    max_block_size: int = 1000,
) -> tuple[pd.DataFrame, BlockingReport]:
    """Union of the candidate pairs of every rule.

    Args:
        prepared: standardised frame (positions 0..n-1 are record numbers).
        rules: blocking rules; a pair is a candidate when any rule's keys all agree.
        groups: when given (e.g. 'left'/'right'), only pairs across different groups are kept.
        max_block_size: a key value shared by more records than this is skipped, with a warning.

    Returns:
        (pairs frame with columns i, j, rules (bit mask, bit k = rule k), report)

    Example:
        >>> import pandas as pd
        >>> from integrate.mapping.spec import BlockingRule
        >>> prepared = pd.DataFrame({"email": ["a@x.org", "a@x.org", None]})
        >>> pairs, _ = block(prepared, [BlockingRule(name="email", keys=["email"])])
        >>> pairs[["i", "j"]].values.tolist()
        [[0, 1]]
    """
    n = len(prepared)
    group_codes = None if groups is None else pd.factorize(groups)[0]
    collected: list[pd.DataFrame] = []
    largest: dict[str, list[tuple[str, int]]] = {}
    skipped: list[tuple[str, str, int]] = []
    for bit, rule in enumerate(rules):
        key = rule_key(prepared, rule)
        if rule.window:
            i, j = _neighbour_pairs(key, rule.window)
            big = pd.Series(dtype="int64")
        else:
            i, j, big = _pairs_for_key(key, max_block_size)
        if group_codes is not None:
            across = group_codes[i] != group_codes[j]
            i, j = i[across], j[across]
        for value, size in big.items():
            shown = str(value).replace("\x1f", " + ")
            log.warning("blocking rule '%s': key '%s' is shared by %d records; block skipped", rule.name,
                        shown, size)
            skipped.append((rule.name, shown, int(size)))
        counts = key.value_counts().head(5)
        largest[rule.name] = [(str(k).replace("\x1f", " + "), int(v)) for k, v in counts.items()]
        collected.append(pd.DataFrame({"i": i, "j": j, "rules": np.int64(1 << bit)}))
    if collected:
        allp = pd.concat(collected, ignore_index=True)
    else:
        allp = pd.DataFrame({"i": pd.Series(dtype=np.int64), "j": pd.Series(dtype=np.int64),
                             "rules": pd.Series(dtype=np.int64)})
    # one row per pair, the rules that found it OR-ed together (sorted by pair, vectorised)
    code = allp["i"].to_numpy() * max(n, 1) + allp["j"].to_numpy()
    order = np.argsort(code, kind="stable")
    code, masks = code[order], allp["rules"].to_numpy()[order]
    starts = np.flatnonzero(np.r_[True, code[1:] != code[:-1]]) if len(code) else np.zeros(0, np.int64)
    unique = code[starts]
    pairs = pd.DataFrame({
        "i": (unique // max(n, 1)).astype(np.int64),
        "j": (unique % max(n, 1)).astype(np.int64),
        "rules": np.bitwise_or.reduceat(masks, starts).astype(np.int64) if len(code) else masks,
    })
    masks = pairs["rules"].to_numpy()
    per_rule = {r.name: int(((masks >> b) & 1).sum()) for b, r in enumerate(rules)}
    unique = {r.name: int((masks == (1 << b)).sum()) for b, r in enumerate(rules)}
    if group_codes is not None:
        sizes = np.bincount(group_codes)
        all_pairs = int((sizes.sum() ** 2 - (sizes ** 2).sum()) // 2)
    else:
        all_pairs = n * (n - 1) // 2
    report = BlockingReport([r.name for r in rules], per_rule, unique, largest, skipped, len(pairs), all_pairs)
    return pairs, report


def default_rules(canonical: CanonicalSchema) -> list[BlockingRule]:
    """Blocking rules derived from the field types when the schema gives none.

    Each rule asks for agreement on little, so that a record with errors in several fields still
    shares some key with its duplicates: exact contact details and identifiers, the birth date,
    name sounds with the birth year, the postcode with a name's start, the names' sounds in either
    order, and sorted neighbourhoods over the names written both ways round.
    """
    fields = canonical.fields
    compared = {n: f for n, f in fields.items() if f.is_compared()}
    names = [n for n, f in compared.items() if f.type == "person_name"]
    dates = [n for n, f in compared.items() if f.type == "date"]
    postcodes = [n for n, f in compared.items() if f.type == "postcode"]
    texts = [n for n, f in compared.items() if f.type == "text"]
    rules: list[BlockingRule] = []

    def add(name: str, keys: list[str], window: int | None = None) -> None:
        rules.append(BlockingRule(name=name, keys=keys, window=window))

    for n, f in compared.items():
        if f.type in ("email", "phone", "identifier"):
            add(f"same_{n}", [n])
    for d in dates[:1]:
        add(f"same_{d}", [d])
        for p in names:
            add(f"{p}_sound_{d}_year", [f"{p}:soundex", f"{d}:year"])
    for pc in postcodes[:1]:
        for p in names:
            add(f"{pc}_{p}_start", [pc, f"{p}:first2"])
            add(f"{p}_{pc}_area", [p, f"{pc}:first2"])
        if len(names) >= 2:
            add(f"{pc}_initials", [pc, f"{names[0]}+{names[1]}:initials"])
        for d in dates[:1]:
            add(f"{pc}_{d}_year", [pc, f"{d}:year"])
        for t in texts[:2]:
            add(f"{pc}_{t}_start", [pc, f"{t}:first3"])
    if len(names) >= 2:
        first, second = names[:2]
        add("name_sounds", [f"{first}+{second}:sounds"])
        add("name_roots", [f"{first}:root", f"{second}:soundex"])
        add("names_any_order", [f"{first}+{second}:roots"])
        add("names_sorted", [f"{second}+{first}"], window=SORTED_WINDOW)
        add("names_sorted_reversed", [f"{first}+{second}"], window=SORTED_WINDOW)
    elif names:
        add("name_sorted", [names[0]], window=SORTED_WINDOW)
    if len(texts) >= 2:
        add("text_start", [texts[0], f"{texts[1]}:first3"])
        add("text_sorted", ["+".join(texts[1:3] + texts[:1])], window=SORTED_WINDOW)
    if not rules:
        for n in texts[:2]:
            add(f"same_{n}", [n])
    return rules
