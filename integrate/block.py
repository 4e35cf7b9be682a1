"""Blocking: records sharing every key of a blocking rule become candidate pairs.

Candidate pairs are a frame of integer record positions ``i < j`` plus a bit mask of the rules
that produced them. Keys are visible columns, computed once per distinct value.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field

import jellyfish
import numpy as np
import pandas as pd

from .errors import InputError
from .mapping.spec import BlockingRule, CanonicalSchema
from .standardise import DAY, MONTH, ROOT_SUFFIX, YEAR

log = logging.getLogger(__name__)

PAIR_COLUMNS = ("i", "j", "rules")
SEPARATOR = "\x1f"  # between the parts of a rule's key text
SORTED_WINDOW = 5  # sorted-neighbourhood window of the default rules (records compared with the next 4)
# A block of more records than this is not compared all against all: its records are sorted by their
# other fields and each is paired with the next SPLIT_WINDOW - 1 (a sorted neighbourhood inside the
# block), so pairs per record stay bounded however common a key value gets.
SPLIT_BLOCK_SIZE = 64
SPLIT_WINDOW = 10
MAX_RULE_PAIRS = 60_000_000  # a rule producing more candidate pairs than this is refused


class BlockingTooLarge(InputError):
    """A blocking rule would produce more candidate pairs than allowed (rather than swapping)."""

    def __init__(self, message: str) -> None:
        super().__init__(message, reason="blocking_too_large",
                         hint="add a further key to the rule in mappings/canonical.yaml, or remove the rule")


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
    # per rule whose blocks were too large: (rule, how many key values, five largest, records left
    # without any candidate pair among them)
    split_blocks: list[tuple[str, int, list[tuple[str, int]], int]] = field(default_factory=list)
    # records identical to another record of their source, matched through it (identical.py)
    identical_copies: int = 0

    @property
    def reduction_ratio(self) -> float:
        """1 - candidates / all pairs (Christen 2012, ch. 7)."""
        return 1.0 - self.candidate_pairs / self.all_pairs if self.all_pairs else 0.0


@dataclass
class _Key:
    """A blocking key as integer codes per record (-1: missing) and the distinct key texts.

    Transforms run on the distinct values only, and keys of several parts are combined as codes,
    so no key text is built per record. A key of several parts builds its texts only when they
    are asked for (the report's largest blocks, sorted neighbourhoods).
    """

    codes: np.ndarray
    count: int  # distinct values: codes run from 0 to count - 1
    _texts: np.ndarray | None = None  # object array of str by code, or None: joined from the parts
    _parts: tuple[_Key, ...] = ()
    _records: np.ndarray | None = None  # a record holding each code, to look up the parts' texts
    _separator: str = SEPARATOR

    @classmethod
    def of(cls, values: pd.Series) -> _Key:
        codes, uniques = pd.factorize(values.astype("string"), use_na_sentinel=True)
        return cls(codes.astype(np.int64), len(uniques), np.asarray(uniques, dtype=object))

    def texts(self, wanted: np.ndarray | None = None) -> np.ndarray:
        """The texts of the codes ``wanted`` (default: all), as an object array."""
        if self._texts is not None:
            return self._texts if wanted is None else self._texts[wanted]
        assert self._records is not None
        records = self._records if wanted is None else self._records[wanted]
        out = self._parts[0].texts(self._parts[0].codes[records])
        for part in self._parts[1:]:
            out = out + self._separator + part.texts(part.codes[records])
        return out

    def map(self, func: Callable[[str], str | None]) -> _Key:
        """``func`` once per distinct value; values it maps to None or '' become missing."""
        mapped = pd.Series([func(v) or None for v in self.texts().tolist()], dtype=object)
        codes, uniques = pd.factorize(mapped, use_na_sentinel=True)
        return _Key(np.append(codes, -1)[self.codes], len(uniques), np.asarray(uniques, dtype=object))

    def without(self, missing: np.ndarray) -> _Key:
        """The same key with the records of ``missing`` taken out (their code becomes -1)."""
        return _Key(np.where(missing, -1, self.codes), self.count, self._texts, self._parts, self._records,
                    self._separator)

    @staticmethod
    def _combined_codes(keys: list[_Key], present: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """A code per distinct combination of the keys' codes among ``present`` records (-1 for
        the others), and a record holding each code."""
        codes = np.zeros(int(present.sum()), np.int64)
        for key in keys:
            codes = pd.factorize(codes * (key.count + 1) + key.codes[present] + 1)[0]
        out = np.full(len(present), -1, np.int64)
        out[present] = codes
        records = np.empty(codes.max(initial=-1) + 1, np.int64)
        records[codes] = np.flatnonzero(present)
        return out, records

    @staticmethod
    def joined(keys: list[_Key], separator: str = SEPARATOR) -> _Key:
        """Several keys together, texts joined by ``separator``; missing when any part is missing.
        Parts never hold the separator, so each combination of codes has a text of its own."""
        codes, records = _Key._combined_codes(keys, np.all([k.codes >= 0 for k in keys], axis=0))
        return _Key(codes, len(records), None, tuple(keys), records, separator)

    @staticmethod
    def spaced(keys: list[_Key]) -> _Key:
        """Several fields as one text 'a b c', a missing field counting as '' (missing when all are)."""
        codes, records = _Key._combined_codes(keys, np.ones(len(keys[0].codes), bool))
        texts = np.append(keys[0].texts(), "")[keys[0].codes[records]]
        for key in keys[1:]:
            texts = texts + " " + np.append(key.texts(), "")[key.codes[records]]
        # equal texts from different parts ('a b' + 'c', 'a' + 'b c') must share one code
        stripped = np.array([t.strip() for t in texts.tolist()], dtype=object)
        return _Key(codes, len(records), stripped).map(lambda v: v)

    def series(self, index: pd.Index) -> pd.Series:
        texts = np.append(self.texts(), None)[self.codes]
        return pd.Series(pd.array(texts.tolist(), dtype="string"), index=index)


class _Keys:
    """Blocking keys of one prepared frame; each column and key expression is worked out once."""

    def __init__(self, prepared: pd.DataFrame) -> None:
        self.prepared = prepared
        self._columns: dict[str, _Key] = {}
        self._parts: dict[str, _Key] = {}

    def column(self, name: str) -> _Key:
        if name not in self._columns:
            self._columns[name] = _Key.of(self.prepared[name])
        return self._columns[name]

    def rule(self, rule: BlockingRule) -> _Key:
        parts = [self.part(expression) for expression in rule.keys]
        return parts[0] if len(parts) == 1 else _Key.joined(parts)

    def part(self, expression: str) -> _Key:
        if expression not in self._parts:
            self._parts[expression] = self._evaluate(expression)
        return self._parts[expression]

    def _evaluate(self, expression: str) -> _Key:
        """Evaluate one key expression ``field[+field...][:transform]``."""
        names, _, transform = expression.partition(":")
        fields = names.split("+")
        for name in fields:
            if name not in self.prepared.columns:
                raise KeyError(name)
        transform = transform or "exact"
        if transform == "year":
            return self.column(fields[0] + YEAR)
        if transform == "month_day":
            return _Key.joined([self.column(fields[0] + MONTH), self.column(fields[0] + DAY)], "-")
        if transform == "root":
            return self.column(fields[0] + ROOT_SUFFIX)
        if transform == "roots" and len(fields) == 2:
            # the formal forms of two names' first words in sorted order: 'Jimmy Roberts' and
            # 'Roberts, James' share 'james roberts' (a swap with a nickname on top)
            roots = _Key.joined([self.column(f + ROOT_SUFFIX) for f in fields], " ")
            return roots.map(lambda v: " ".join(sorted(v.split(" "))))
        if len(fields) > 1:
            base = _Key.spaced([self.column(name) for name in fields])
        else:
            base = self.column(fields[0])
        if len(fields) == 1 and fields[0] + YEAR in self.prepared.columns and transform == "exact":
            # an exact date key uses full dates only: a year-only value would block a whole year
            base = base.without(self.prepared[fields[0] + DAY].isna().to_numpy())
        if transform == "exact":
            return base
        if transform == "soundex":
            return base.map(lambda v: jellyfish.soundex(v.replace(" ", "")))
        if transform == "nysiis":
            return base.map(lambda v: jellyfish.nysiis(v.replace(" ", "")))
        if transform == "sounds":
            # sorted Soundex codes of every word: catches swapped given/family names despite a typo
            return base.map(lambda v: " ".join(sorted({jellyfish.soundex(t) for t in v.split()})))
        if transform == "initials":
            # sorted first letters of every word: survives typos after the first letter and swaps
            return base.map(lambda v: "".join(sorted(t[0] for t in v.split())))
        if transform == "tokens":
            return base.map(lambda v: " ".join(sorted(v.split())))
        if transform.startswith("first") and transform[5:].isdigit():
            return base.map(lambda v: v.replace(" ", "")[:int(transform[5:])])
        if transform.startswith("last") and transform[4:].isdigit():
            return base.map(lambda v: v.replace(" ", "")[-int(transform[4:]):])
        raise ValueError(f"unknown key transform '{transform}'")


def rule_key(prepared: pd.DataFrame, rule: BlockingRule) -> pd.Series:
    """The blocking key of every record under one rule (NA when any part is missing)."""
    return _Keys(prepared).rule(rule).series(prepared.index)


def _pairs_in_blocks(codes: np.ndarray, records: np.ndarray, size_of: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every pair within the blocks of ``records`` (ordered by block), as positions into ``records``'s
    frame; ``size_of`` is each listed record's block size."""
    if not len(records):
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    starts = np.flatnonzero(np.r_[True, codes[records][1:] != codes[records][:-1]])
    place = np.arange(len(records)) - np.repeat(starts, np.diff(np.r_[starts, len(records)]))
    followers = size_of - 1 - place  # each record pairs with the records after it in its block
    left = np.repeat(np.arange(len(records)), followers)
    right = left + 1 + np.arange(len(left)) - np.repeat(np.cumsum(followers) - followers, followers)
    return records[left], records[right]


def _pairs_for_key(key: _Key, max_block: int, rank: np.ndarray | None = None, window: int = SPLIT_WINDOW
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every pair of records sharing a key value; a block larger than ``max_block`` is split by a
    sorted neighbourhood inside it (records in ``rank`` order, each paired with the next
    ``window - 1``). Returns (i, j, codes of the split blocks, largest first)."""
    sizes = np.bincount(key.codes[key.codes >= 0], minlength=key.count)
    big = np.flatnonzero(sizes > max_block)
    size_of = np.append(sizes, 0)[key.codes]  # a missing key (-1) is in no block
    keep = (size_of > 1) & (size_of <= max_block)
    records = np.flatnonzero(keep)
    records = records[np.argsort(key.codes[records], kind="stable")]  # by block, then position
    i, j = _pairs_in_blocks(key.codes, records, size_of[records])
    if len(big):
        inside = np.flatnonzero(size_of > max_block)
        order = np.arange(len(key.codes)) if rank is None else rank
        inside = inside[np.lexsort((order[inside], key.codes[inside]))]  # by block, then rank
        same = key.codes[inside][1:] == key.codes[inside][:-1]
        left, right = [i], [j]
        for step in range(1, window):
            ok = np.ones(max(len(inside) - step, 0), bool)
            for k in range(step):
                ok &= same[k:len(same) - step + 1 + k]
            left.append(inside[:-step][ok])
            right.append(inside[step:][ok])
        a, b = np.concatenate(left), np.concatenate(right)
        i, j = np.minimum(a, b), np.maximum(a, b)
    big = big[np.argsort(-sizes[big], kind="stable")]
    return i, j, big


def record_rank(prepared: pd.DataFrame, columns: list[str]) -> np.ndarray:
    """Each record's place when records are sorted by ``columns`` in turn (missing last), for the
    sorted neighbourhoods that split large blocks: duplicates agree on most fields and sort near."""
    keys = []
    for column in columns[::-1]:  # np.lexsort: the last key is the primary one
        codes, uniques = pd.factorize(prepared[column].astype("string"), use_na_sentinel=True)
        order = np.argsort(np.asarray(uniques, dtype=object).astype(str), kind="stable")
        rank = np.empty(len(uniques) + 1, np.int64)
        rank[order] = np.arange(len(uniques))
        rank[-1] = len(uniques)
        keys.append(rank[codes])
    if not keys:
        return np.arange(len(prepared))
    out = np.empty(len(prepared), np.int64)
    out[np.lexsort(keys)] = np.arange(len(prepared))
    return out


def _neighbour_pairs(key: _Key, window: int) -> tuple[np.ndarray, np.ndarray]:
    """Sorted neighbourhood (Hernández & Stolfo 1995): pairs within ``window`` places in key order."""
    present = np.flatnonzero(key.codes >= 0)
    if len(present) < 2:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    value_rank = np.empty(key.count, np.int64)
    value_rank[np.argsort(key.texts().astype(str), kind="mergesort")] = np.arange(key.count)
    order = present[np.argsort(value_rank[key.codes[present]], kind="mergesort")]
    left, right = [], []
    for step in range(1, window):
        left.append(order[:-step])
        right.append(order[step:])
    i = np.concatenate(left)
    j = np.concatenate(right)
    return np.minimum(i, j).astype(np.int64), np.maximum(i, j).astype(np.int64)


def _largest_blocks(key: _Key, count: int = 5) -> list[tuple[str, int]]:
    """The ``count`` largest blocks as (key, records), largest first (ties: first seen first)."""
    sizes = np.bincount(key.codes[key.codes >= 0], minlength=key.count)
    top = np.argsort(-sizes, kind="stable")[:count]
    top = top[sizes[top] > 0]
    return [(str(text), int(size)) for text, size in zip(key.texts(top).tolist(), sizes[top].tolist())]


def block(
    prepared: pd.DataFrame,
    rules: list[BlockingRule],
    *,
    groups: pd.Series | None = None,
    max_block_size: int = 1000,
    split_block_size: int = SPLIT_BLOCK_SIZE,
    max_rule_pairs: int = MAX_RULE_PAIRS,
    order_columns: list[str] | None = None,
) -> tuple[pd.DataFrame, BlockingReport]:
    """Union of the candidate pairs of every rule.

    Args:
        prepared: standardised frame (positions 0..n-1 are record numbers).
        rules: blocking rules; a pair is a candidate when any rule's keys all agree.
        groups: when given (e.g. 'left'/'right'), only pairs across different groups are kept.
        max_block_size, split_block_size: a block of more records than the smaller of the two is
            split by a sorted neighbourhood inside it (window SPLIT_WINDOW), one warning per rule.
        max_rule_pairs: a rule producing more pairs than this raises BlockingTooLarge.
        order_columns: fields that order records inside a split block (default: every column).

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
    keys = _Keys(prepared)
    limit = max(2, min(max_block_size, split_block_size))
    rank: np.ndarray | None = None
    in_split: list[tuple[str, np.ndarray, np.ndarray, np.ndarray]] = []  # rule, its split codes, key codes, sizes
    for bit, rule in enumerate(rules):
        key = keys.rule(rule)
        if rule.window:
            i, j = _neighbour_pairs(key, rule.window)
            big = np.zeros(0, np.int64)
        else:
            sizes = np.bincount(key.codes[key.codes >= 0], minlength=key.count)
            whole = sizes[sizes <= limit]
            expected = int((whole * (whole - 1) // 2).sum() + (sizes[sizes > limit] * (SPLIT_WINDOW - 1)).sum())
            if expected > max_rule_pairs:
                top = ", ".join(f"'{t}' ({n})" for t, n in _largest_blocks(key))
                raise BlockingTooLarge(
                    f"blocking rule '{rule.name}' would make about {expected:,} candidate pairs "
                    f"(limit {max_rule_pairs:,}); its largest key values: {top}")
            if rank is None and (sizes > limit).any():
                rank = record_rank(prepared, order_columns if order_columns is not None else
                                   [c for c in prepared.columns if not str(c).startswith("_")])
            i, j, big = _pairs_for_key(key, limit, rank)
        if group_codes is not None:
            across = group_codes[i] != group_codes[j]
            i, j = i[across], j[across]
        if len(big):
            in_split.append((rule.name, big, key.codes, np.bincount(key.codes[key.codes >= 0], minlength=key.count)))
            largest_split = [(str(t).replace(SEPARATOR, " + "), int(n)) for t, n in
                             zip(key.texts(big[:5]).tolist(), in_split[-1][3][big[:5]].tolist())]
            in_split[-1] = (rule.name, big, key.codes, np.array(largest_split, dtype=object))
        largest[rule.name] = [(k.replace(SEPARATOR, " + "), v) for k, v in _largest_blocks(key)]
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
    split = _split_summary(in_split, pairs, n, limit)
    per_rule = {r.name: int(((masks >> b) & 1).sum()) for b, r in enumerate(rules)}
    unique = {r.name: int((masks == (1 << b)).sum()) for b, r in enumerate(rules)}
    if group_codes is not None:
        sizes = np.bincount(group_codes)
        all_pairs = int((sizes.sum() ** 2 - (sizes ** 2).sum()) // 2)
    else:
        all_pairs = n * (n - 1) // 2
    report = BlockingReport([r.name for r in rules], per_rule, unique, largest, skipped, len(pairs), all_pairs,
                            split_blocks=split)
    return pairs, report


def _split_summary(in_split: list, pairs: pd.DataFrame, n: int, limit: int
                   ) -> list[tuple[str, int, list[tuple[str, int]], int]]:
    """One warning per rule with blocks too large to compare all against all."""
    if not in_split:
        return []
    has_pair = np.zeros(n, bool)
    has_pair[pairs["i"].to_numpy()] = True
    has_pair[pairs["j"].to_numpy()] = True
    out = []
    for name, big, codes, top in in_split:
        inside = np.isin(codes, big)
        alone = int((inside & ~has_pair).sum())
        shown = [(str(t), int(c)) for t, c in top.tolist()]
        log.warning("blocking rule '%s': %d key values are shared by more than %d records (largest: %s); "
                    "each was split by a sorted neighbourhood (window %d) inside it; %d of their records "
                    "have no candidate pair", name, len(big), limit,
                    ", ".join(f"'{t}' ({c})" for t, c in shown), SPLIT_WINDOW, alone)
        out.append((name, len(big), shown, alone))
    return out


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
