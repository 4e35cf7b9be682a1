"""Fellegi–Sunter scoring: m/u probabilities by EM, weights log2(m/u), match probabilities.

Fellegi & Sunter (1969) weigh a comparison pattern by the ratio m(γ)/u(γ); with conditional
independence the total weight is the sum of per-field weights (base 2, following Newcombe et al.
1959). m and u are estimated by EM over the distinct grade patterns of the candidate pairs
(Winkler's approach), starting from sensible values: agreement likely among matches, and u from
random record pairs. Exact agreement on a value is weighed by that value's frequency, so a rare
family name counts for more than a common one.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from functools import partial

import numpy as np
import pandas as pd

from .compare import APART, GRADE_NAMES, MISSING, NAME_BUCKETS, NAME_PAIR, compare, name_pair_grades
from .mapping.spec import CanonicalSchema, Thresholds

LINK, POSSIBLE, NON_LINK = "link", "possible link", "non-link"
LABEL_SAME, LABEL_DIFFERENT = 1, 2  # codes of reviewed pairs passed to estimate (0: undecided)
RANDOM_PAIRS = 100_000  # random record pairs drawn to estimate u (seeded)
EM_MAX_ITER = 3000  # FEBRL3 without the identifier needs 2,294 (a slow trade between two non-match classes)
EM_TOLERANCE = 1e-7  # relative change of the log-likelihood that ends EM ...
# ... together with this largest change, between two steps, of any grade pattern's match
# probability: the likelihood alone flattens out while the match class still moves. (The non-match
# classes may keep trading mass along a flat ridge of the likelihood long after; that hardly moves
# a match probability, and these are what decide links.)
PARAM_TOLERANCE = 1e-4
# At most this many matching pairs per record on average: the match share times all pairs is held at
# or below MAX_MATCHES_PER_RECORD x records (a record has few true duplicates, so matches grow with
# the records, while candidate and background pairs grow faster). A round general bound, not fitted
# (FEBRL3, with the most duplicates of the sets tried, has 1.3 per record); it never binds on the
# demo, the second seed, 100,000 generated people or FEBRL, and without it the match class took 42 %
# of all pairs at 300,000 generated people (7.5M links, one component of 517,136 records).
MAX_MATCHES_PER_RECORD = 2.0
PSEUDO_COUNT = 0.5  # added to every level's count so no probability is exactly 0 or 1
# Share of relatives' pairs (one household or family) born on the same day. About one birth in 60
# is a twin birth in the UK (common practice, recalled from memory), so roughly 3 in 100 sibling
# pairs are twins; partners and parent-child pairs never are. 0.02 is a middle estimate; it keeps
# a same-household pair with one birth date and another first name from passing for one person.
TWIN_SHARE = 0.02
# Share of relatives' pairs with the same family name: partners, parents and children mostly
# share one, but not always (common practice; a round guess, not a measured figure)
RELATIVES_SHARE_FAMILY = 0.8
TF_TYPES = frozenset({"person_name", "date", "identifier"})
# person-name grades from "close" up (close, equivalent) also weigh by how common the name is
NAME_NEAR = 2
SEED = 20261202
# A stratum's match share is drawn towards the overall share as if the stratum held this many more
# pairs at the overall share, so a stratum of a few pairs borrows its prior from the rest. Strata of
# real inputs hold millions of pairs, and results on the demo and the second seed did not move for
# any value from 100 to 100,000 (common practice for shrinking small groups; not tuned).
STRATUM_PRIOR_PAIRS = 10_000
WEIGH_SLICE = 1_000_000  # pairs weighed at once (memory for the work in flight, not the result)


@dataclass
class FieldModel:
    """m and u per grade of one field, plus its weights in bits.

    ``u`` is the grade distribution among non-matching candidate pairs (all non-match classes
    together); ``related`` is the distribution in the "shares contact details" class, if used.
    """

    name: str
    type: str
    m: list[float]
    u: list[float]
    u_random: list[float]
    related: list[float] | None = None

    @property
    def weights(self) -> list[float]:
        return [float(np.log2(m / u)) for m, u in zip(self.m, self.u)]


@dataclass
class ScoreModel:
    """Everything the scorer estimated; shown in the run report."""

    fields: dict[str, FieldModel]
    prior: float  # share of candidate pairs that are matches (λ)
    iterations: int
    converged: bool
    class_shares: dict[str, float] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    _theta: dict[str, dict[str, np.ndarray]] = field(default_factory=dict, repr=False)
    # the match share per evidence stratum (``evidence_strata``: which fields both records of a pair
    # have), where it differs from ``prior``; a stratum not listed takes ``prior``
    strata: dict[int, float] = field(default_factory=dict)

    @property
    def prior_weight(self) -> float:
        """log2 of the prior odds of a match over all pairs."""
        return float(np.log2(self.prior / (1 - self.prior)))

    def prior_weights(self, grades: np.ndarray) -> np.ndarray:
        """log2 prior odds of a match for rows of model grades (columns in the order of ``fields``):
        the share of matches among all pairs that can compare the same fields."""
        strata = evidence_strata(grades)
        if not self.strata:
            return np.full(len(strata), self.prior_weight)
        known, shares = np.array(list(self.strata), np.int64), np.array(list(self.strata.values()))
        order = np.argsort(known)
        known, shares = known[order], shares[order]
        at = np.clip(np.searchsorted(known, strata), 0, len(known) - 1)  # self.strata is not empty here
        share = np.where(known[at] == strata, shares[at], self.prior)
        return np.log2(share / (1 - share))

    def class_log_likelihoods(self, grades: np.ndarray, names: list[str]) -> dict[str, np.ndarray]:
        """ln P(pattern | class) per class for rows of grades (columns = names)."""
        log_f = {k: np.zeros(len(grades)) for k in self._theta}
        for c, f in enumerate(names):
            g = grades[:, c]
            present = g != MISSING
            for k, theta in self._theta.items():
                log_f[k][present] += np.log(theta[f][g[present]])
        return log_f

    def pattern_weight(self, grades: np.ndarray, names: list[str], rarity: np.ndarray | None = None,
                       shared_rarity: np.ndarray | None = None) -> np.ndarray:
        """log2 P(pattern | match) / P(pattern | non-match) for rows of grades (columns = names).

        ``rarity`` (bits per row, the value-frequency adjustments) makes an agreement on a rare
        value less likely among non-matches: u(v) = u * 2^-rarity in each non-match class, except
        that relatives share their family name however rare it is, so their class does not get
        ``shared_rarity`` (the family name's part). Without it the bonus for a rare family name
        counted against relatives as much as against strangers, and households sharing one
        passed for matches.
        """
        return self.weigh_classes(self.class_log_likelihoods(grades, names), rarity, shared_rarity)

    def weigh_classes(self, log_f: dict[str, np.ndarray], rarity: np.ndarray | None = None,
                      shared_rarity: np.ndarray | None = None) -> np.ndarray:
        """The weight in bits from per-class log-likelihoods (see ``pattern_weight``)."""
        non = [k for k in self._theta if k != MATCH]
        shares = np.array([self.class_shares[k] for k in non])
        shares = shares / shares.sum()
        rows = []
        for k, share in zip(non, shares):
            row = log_f[k] + np.log(share)
            if rarity is not None:
                spared = shared_rarity if (k == RELATED and shared_rarity is not None) else 0.0
                row = row - (rarity - spared) * np.log(2)
            rows.append(row)
        log_non = np.logaddexp.reduce(np.vstack(rows), axis=0)
        return (log_f[MATCH] - log_non) / np.log(2)


MATCH, RELATED, NEIGHBOUR, UNRELATED = "match", "shares contact details", "same area", "unrelated"
# Field types that people of one household (or one family) tend to share, and types that tell
# them apart. A pair class for "shares contact details but is another person" keeps EM from
# mistaking a household for a match (the usual failure of two-class EM on people data).
CONTACT_TYPES = frozenset({"email", "phone", "postcode", "text"})
PERSONAL_TYPES = frozenset({"date", "quantity", "identifier"})


def evidence_strata(grades: np.ndarray) -> np.ndarray:
    """Per row of grades, which fields can be compared at all: bit c is set when column c is not
    missing. Pairs of sparse records, or of two sources that hold different fields, compare little
    and fall in strata of their own."""
    out = np.zeros(len(grades), np.int64)
    for c in range(grades.shape[1]):
        out |= (grades[:, c] != MISSING).astype(np.int64) << c
    return out


def _levels(ftype: str) -> int:
    return len(GRADE_NAMES[ftype])


def all_pairs_count(n: int, groups: np.ndarray | None) -> int:
    """Number of record pairs (across groups only when groups are given)."""
    if groups is None:
        return n * (n - 1) // 2
    sizes = np.bincount(pd.factorize(groups)[0]).astype(np.int64)
    return int((sizes.sum() ** 2 - (sizes ** 2).sum()) // 2)


def record_hashes(prepared: pd.DataFrame) -> np.ndarray:
    """A 64-bit hash of each record's standardised values: what a record is, not where it sits."""
    if prepared.shape[1] == 0:
        return np.arange(len(prepared), dtype=np.uint64)
    return pd.util.hash_pandas_object(prepared, index=False).to_numpy(np.uint64)


def _mix(values: np.ndarray, salt: int) -> np.ndarray:
    """SplitMix64's finaliser (Steele, Lea & Flood 2014) of values xor a salt: a fresh hash per salt."""
    z = values ^ np.uint64((salt * 0x9E3779B97F4A7C15) & 0xFFFFFFFFFFFFFFFF)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def random_pairs(n: int, count: int, groups: np.ndarray | None = None, seed: int = SEED,
                 hashes: np.ndarray | None = None) -> pd.DataFrame:
    """About ``count`` random distinct record pairs; across groups only when groups are given.

    The pairs are drawn by record hash, not by position: in each of a few rounds the records are
    put in the order of a salted hash of their values and each is paired with the next (the last
    round keeps the share of its pairs it needs, chosen by a hash of the pair). Adding,
    removing or reordering a handful of records changes a handful of pairs (at most two per
    round per record), so the u estimates and the fit that rests on them stay put. Records with
    equal values (equal hashes) are never paired with each other. When there are no more pairs
    than ``count``, all of them are returned.
    """
    empty = pd.DataFrame({"i": np.zeros(0, np.int64), "j": np.zeros(0, np.int64)})
    if n < 2:
        return empty
    total = all_pairs_count(n, groups)
    if total <= count:
        i, j = np.triu_indices(n, 1)
        keep = np.ones(len(i), bool) if groups is None else groups[i] != groups[j]
        return pd.DataFrame({"i": i[keep].astype(np.int64), "j": j[keep].astype(np.int64)})
    base = np.arange(n, dtype=np.uint64) if hashes is None else np.asarray(hashes, np.uint64)
    # rounds of n - 1 neighbour pairs needed (before pairs within one group are dropped); the last,
    # partial round keeps a share of its pairs chosen by pair hash, so the sample grows smoothly
    rounds = count / ((n - 1) * (total / (n * (n - 1) / 2)))
    parts = []
    for r in range(int(np.ceil(rounds))):
        order = np.argsort(_mix(base, seed + r), kind="stable")
        a, b = order[:-1], order[1:]
        keep = base[a] != base[b]
        if r + 1 > rounds:
            cut = np.uint64(min(int((rounds - r) * 2.0**64), 2**64 - 1))
            keep &= _mix(base[a] ^ base[b], seed - r - 1) < cut
        if groups is not None:
            keep &= groups[a] != groups[b]
        parts.append(np.column_stack([np.minimum(a, b)[keep], np.maximum(a, b)[keep]]))
    both = np.unique(np.concatenate(parts), axis=0)
    return pd.DataFrame({"i": both[:, 0].astype(np.int64), "j": both[:, 1].astype(np.int64)})


def pattern_codes(matrix: np.ndarray) -> np.ndarray:
    """A code per row of a small-integer matrix, equal for equal rows, numbered in order of first
    appearance (a hash per column, so no sort of the rows)."""
    return column_pattern_codes(list(matrix.T), len(matrix))


def _rows(columns: list[np.ndarray], rows: np.ndarray) -> np.ndarray:
    """The matrix of ``columns`` at ``rows`` only, as int64."""
    out = np.empty((len(rows), len(columns)), np.int64)
    for k, column in enumerate(columns):
        out[:, k] = column[rows]
    return out


# A row's mixed-radix number must stay below this to fit an int64 (with room for one more step)
_RADIX_LIMIT = 2 ** 62


def column_pattern_codes(columns: list[np.ndarray], rows: int) -> np.ndarray:
    """``pattern_codes`` of the matrix whose columns are ``columns`` (each ``rows`` long), without
    building it: each row's values become one mixed-radix number, factorised once (and in between
    only when the number would outgrow an int64). Millions of pairs' grades stay one int8 column
    per field instead of a copy as an int64 matrix, and rows are hashed once, not once per column.
    The numbering is the same: by first appearance of each distinct row."""
    codes = np.zeros(rows, np.int64)
    span = 1  # codes lie in 0 .. span - 1
    for column in columns:
        low, high = int(column.min(initial=0)), int(column.max(initial=0))
        width = high - low + 1
        if span * width >= _RADIX_LIMIT:
            codes = pd.factorize(codes)[0]
            span = int(codes.max(initial=-1)) + 1
        codes = codes * width + (column.astype(np.int64) - low)
        span *= width
    return pd.factorize(codes)[0].astype(np.int64, copy=False)


def _level_freq(grades: np.ndarray, levels: int) -> np.ndarray:
    present = grades[grades != MISSING]
    counts = np.bincount(present, minlength=levels).astype(float) + PSEUDO_COUNT
    return counts / counts.sum()


def _initial_m(levels: int) -> np.ndarray:
    # matches mostly agree: 5% "different", the rest doubling towards exact agreement
    ladder = 2.0 ** np.arange(levels - 1)
    return np.concatenate([[0.05], 0.95 * ladder / ladder.sum()])


def _initial_classes(types: dict[str, str], u_random: dict[str, np.ndarray]
                     ) -> tuple[dict[str, dict[str, np.ndarray]], dict[str, float], dict[str, set[str]]]:
    """Starting profiles, shares, and which fields EM may re-estimate in each class.

    Matches agree; unrelated pairs look like random pairs. When the schema has both contact and
    personal fields, two more classes describe pairs that are not matches but share something:
    relatives (contact details and family name) and people of one area (postcode, street). Their
    personal fields (dates, quantities, identifiers) stay at the random-pair profile, so these
    classes can never absorb true matches that carry a typo.
    """
    agree = {f: _initial_m(_levels(t)) for f, t in types.items()}
    theta = {MATCH: agree, UNRELATED: {f: u.copy() for f, u in u_random.items()}}
    shares = {MATCH: 0.2, UNRELATED: 0.8}
    free = {MATCH: set(types), UNRELATED: set(types)}
    kinds = set(types.values())
    if kinds & CONTACT_TYPES and kinds & (PERSONAL_TYPES | {"person_name", NAME_PAIR}):
        related = {}
        for f, t in types.items():
            if t in CONTACT_TYPES or t == "category":
                related[f] = agree[f].copy()
            elif t == NAME_PAIR:
                related[f] = _relatives_name_profile(u_random[f])
            elif t == "person_name":
                related[f] = 0.5 * (agree[f] + u_random[f])
            elif t == "date":
                related[f] = _with_twins(u_random[f])
            else:
                related[f] = u_random[f].copy()
        theta[RELATED] = related
        # the joint name field stays at its profile too: learned, it let the class drift into a
        # copy of "unrelated" on large inputs (most candidate pairs there are strangers who share
        # a family name; family-name agreement in the class fell to 0.006 on 30,000 generated
        # people), and the match class then took in the households
        free[RELATED] = {f for f, t in types.items() if t not in PERSONAL_TYPES and t != NAME_PAIR}
        shares = {MATCH: 0.2, RELATED: 0.2, UNRELATED: 0.6}
        if "postcode" in kinds:
            # people of one area share a postcode and little else; without a class of their own
            # they crowd the relatives' class out
            theta[NEIGHBOUR] = {f: (agree[f].copy() if t == "postcode" else u_random[f].copy())
                                for f, t in types.items()}
            free[NEIGHBOUR] = {f for f, t in types.items() if t in ("postcode", "text")}
            shares = {MATCH: 0.2, RELATED: 0.1, NEIGHBOUR: 0.1, UNRELATED: 0.6}
    return theta, shares, free


def _with_twins(profile: np.ndarray) -> np.ndarray:
    """A date profile for relatives: as random pairs', except that some relatives share a birth
    date (twins). Held fixed, so the class cannot absorb matches that carry a name error."""
    share = max(float(profile[-1]), TWIN_SHARE)
    out = profile * (1.0 - share) / max(1.0 - float(profile[-1]), 1e-12)
    out[-1] = share
    return out


def _relatives_name_profile(random_profile: np.ndarray) -> np.ndarray:
    """The joint name profile of relatives, held fixed: they are different people, so their first
    names compare like random pairs' first names, while most share the family name.

    Levels are first bucket * 5 + second bucket (``NAME_BUCKETS``). Of the second names,
    ``RELATIVES_SHARE_FAMILY`` agree; the rest spread evenly over the other buckets. Spread as
    random pairs' second names spread (mostly "differs"), the class took in strangers on large
    inputs: on 30,000 generated people its contact profile drifted to "different" and the
    households it should hold fell to the match class (pairwise precision 0.76)."""
    size = len(NAME_BUCKETS)
    random_joint = np.append(random_profile, 0.0).reshape(size, size)
    first = random_joint.sum(axis=1)
    agrees = NAME_BUCKETS.index("agrees")
    second = np.full(size, (1.0 - RELATIVES_SHARE_FAMILY) / (size - 1))
    second[agrees] = RELATIVES_SHARE_FAMILY
    out = np.outer(first / first.sum(), second).reshape(-1)[:-1]
    out = out + 1e-9
    return out / out.sum()


def model_grades(grades: pd.DataFrame, types: dict[str, str]) -> tuple[pd.DataFrame, dict[str, str]]:
    """The grades the model sees: the first two person-name fields become one joint field."""
    names = [f for f in grades.columns if types[f] == "person_name"]
    if len(names) < 2:
        return grades, dict(types)
    first, second = names[:2]
    joint = f"{first}+{second}"
    out = pd.DataFrame(index=grades.index)
    out_types: dict[str, str] = {}
    for f in grades.columns:
        if f == first:
            out[joint] = name_pair_grades(grades[first].to_numpy(), grades[second].to_numpy()).astype(np.int8)
            out_types[joint] = NAME_PAIR
        elif f != second:
            out[f] = grades[f]
            out_types[f] = types[f]
    return out, out_types


def estimate(grades: pd.DataFrame, types: dict[str, str], u_random: dict[str, np.ndarray],
             background: pd.DataFrame | None = None, background_weight: float = 0.0, *,
             labels: np.ndarray | None = None, start: ScoreModel | None = None,
             counts: np.ndarray | None = None, records: int | None = None) -> ScoreModel:
    """EM for the class profiles and shares over the distinct grade patterns of all record pairs.

    A latent-class mixture (Winkler's EM generalised to more than two classes): each class has
    one probability per field and grade, fields independent within a class. The pairs blocking
    did not propose are represented by a random sample of them (``background``: random pairs that
    are not candidate pairs), each standing for ``background_weight`` pairs; without it the model
    describes the candidate pairs alone, whose non-matches agree far more often than random pairs
    because blocking chose them for it. Background pairs are non-matches: a match blocking did not
    propose can never be linked, and counted as one, each stood for hundreds of matches, so the
    match class grew to three times the true matches on the demo and took in households and
    namesakes (a fully different given name became 9 % of its name profile, against 0.02 % among
    the true pairs).

    Classes' shares differ by evidence stratum (``evidence_strata``: which fields a pair can
    compare at all): among pairs of two sources that share only names and birth dates, or of a
    sparse record, matches are a different share than among pairs that can compare everything.
    Each stratum's share of matches is estimated with the rest (drawn towards the overall share by
    ``STRATUM_PRIOR_PAIRS``); the non-match classes keep one mix among themselves.

    Args:
        labels: per candidate pair 0 (undecided), ``LABEL_SAME`` or ``LABEL_DIFFERENT``: decided
            pairs are held to their decision (EM with partly classified data).
        start: a fitted model whose profiles and shares start EM (default: the sensible guesses).
        counts: how many candidate pairs each row of ``grades`` stands for (default: 1 each), so
            a distributed engine can pass distinct patterns with counts reduced across workers.
        records: how many records the pairs are of; when given, the match share is held to at most
            ``MAX_MATCHES_PER_RECORD`` matches per record (an M-step under that bound) and the model
            warns when the bound holds it.
    """
    names = list(grades.columns)
    marks = np.zeros(len(grades), np.int8) if labels is None else np.asarray(labels, np.int8)
    # the candidate pairs' rows, then the background's: one column per field plus the label,
    # kept in the grades' own (small) dtype
    with_background = background is not None and len(background) > 0 and background_weight > 0
    columns = [grades[f].to_numpy() for f in names] + [marks]
    if with_background:
        assert background is not None
        columns = [np.concatenate([column, extra]) for column, extra in
                   zip(columns, [background[f].to_numpy() for f in names]
                       + [np.full(len(background), LABEL_DIFFERENT, np.int8)],
                       strict=True)]
    # distinct (grades, label) rows, in order of first appearance
    codes = column_pattern_codes(columns, len(columns[0]))
    # candidate pairs count 1 each, background pairs background_weight each
    counts = np.bincount(codes[:len(grades)], weights=counts, minlength=codes.max(initial=-1) + 1).astype(float)
    candidates = float(counts.sum())
    if with_background:
        counts += background_weight * np.bincount(codes[len(grades):], minlength=len(counts))
    first = np.flatnonzero(np.diff(np.maximum.accumulate(codes), prepend=-1) > 0)  # each pattern's first row
    G, label = _rows(columns[:-1], first), columns[-1][first].astype(np.int64)
    del columns, codes
    theta, shares, free = _initial_classes(types, u_random)
    strata, stratum_sizes = _strata_of(G, counts)
    start_strata: dict[int, float] = {}
    if start is not None:
        theta = {k: {f: v.copy() for f, v in profile.items()} for k, profile in start._theta.items()}
        shares = dict(start.class_shares)
        start_strata = start.strata
    elif background is not None and background_weight > 0:
        # matches and relatives are a small share of all pairs: start them near the candidate count
        base = min(0.5, 0.3 * candidates / counts.sum())
        shares = {k: (base if k != UNRELATED else 1.0) for k in shares}
        shares[UNRELATED] = 1.0 - base * (len(shares) - 1)
    classes = list(theta)
    # a decided pair can only belong to the classes its decision allows
    allowed = np.ones((len(classes), len(G)), dtype=bool)
    allowed[:, label == LABEL_SAME] = False
    allowed[classes.index(MATCH), label == LABEL_SAME] = True
    allowed[classes.index(MATCH), label == LABEL_DIFFERENT] = False
    # one-hot design: column offset[f] + grade is 1 where a pattern has that grade (missing: none)
    sizes = [_levels(types[f]) for f in names]
    offset = np.concatenate([[0], np.cumsum(sizes)])
    design = np.zeros((len(G), int(offset[-1])))
    for col in range(len(names)):
        present = G[:, col] != MISSING
        design[np.flatnonzero(present), offset[col] + G[present, col]] = 1.0
    bound = None if not records else min(1.0, MAX_MATCHES_PER_RECORD * records / float(counts.sum()))
    match = classes.index(MATCH)
    # class shares per stratum (classes x strata): the match share, the rest in the overall mix
    per_stratum = _stratum_shares(classes, shares, np.array([start_strata.get(int(k), shares[MATCH])
                                                             for k in stratum_sizes.index]))
    converged = False
    previous = -np.inf
    previous_params = None
    iteration = 0
    for iteration in range(1, EM_MAX_ITER + 1):  # noqa: B007 - the count is reported
        log_theta = np.column_stack([np.concatenate([np.log(theta[k][f]) for f in names]) for k in classes])
        log_f = (design @ log_theta).T + np.log(per_stratum[:, strata])
        log_f = np.where(allowed, log_f, -np.inf)
        log_total = np.logaddexp.reduce(log_f, axis=0)
        post = np.exp(log_f - log_total)
        likelihood = float((counts * log_total).sum())
        params = post[classes.index(MATCH)]
        steady = previous_params is not None and float(np.abs(params - previous_params).max()) <= PARAM_TOLERANCE
        if steady and abs(likelihood - previous) <= EM_TOLERANCE * abs(likelihood):
            converged = True
            break
        previous, previous_params = likelihood, params
        weighted = post * counts  # classes x patterns
        level_counts = design.T @ weighted.T  # levels x classes
        for c, k in enumerate(classes):
            shares[k] = float(np.clip(weighted[c].sum() / counts.sum(), 1e-9, 1 - 1e-9))
            for col, f in enumerate(names):
                if f not in free[k]:
                    continue
                new = level_counts[offset[col]:offset[col + 1], c] + PSEUDO_COUNT
                if k in (RELATED, NEIGHBOUR) and APART in GRADE_NAMES[types[f]]:
                    new = _apart_as_random(new, u_random[f], GRADE_NAMES[types[f]].index(APART))
                theta[k][f] = new / new.sum()
        if bound is not None and shares[MATCH] > bound:
            # the M-step for the shares under the bound: the match share at it, the others in proportion
            rest = sum(v for k, v in shares.items() if k != MATCH)
            shares = {k: bound if k == MATCH else v * (1 - bound) / rest for k, v in shares.items()}
        sizes_now = stratum_sizes.to_numpy()
        matched = np.bincount(strata, weights=weighted[match], minlength=len(sizes_now))
        in_stratum = (matched + STRATUM_PRIOR_PAIRS * shares[MATCH]) / (sizes_now + STRATUM_PRIOR_PAIRS)
        overall = float((in_stratum * sizes_now).sum() / sizes_now.sum())
        if overall > shares[MATCH]:  # the bound (or the shrinking) holds the total where the shares put it
            in_stratum *= shares[MATCH] / overall
        per_stratum = _stratum_shares(classes, shares, np.clip(in_stratum, 1e-12, 1 - 1e-9))
    non = [k for k in classes if k != MATCH]
    total_non = sum(shares[k] for k in non)
    fields = {}
    for f in names:
        u = sum(shares[k] * theta[k][f] for k in non) / total_non
        fields[f] = FieldModel(f, types[f], theta[MATCH][f].tolist(), u.tolist(), u_random[f].tolist(),
                               theta[RELATED][f].tolist() if RELATED in theta else None)
    model = ScoreModel(fields, shares[MATCH], iteration, converged, dict(shares), _theta=theta,
                       strata={int(k): float(v) for k, v in zip(stratum_sizes.index, per_stratum[match])})
    model.warnings.extend(_plausibility(model))
    if bound is not None and shares[MATCH] >= bound * (1 - 1e-6):
        model.warnings.append(f"the match share is held at its bound ({MAX_MATCHES_PER_RECORD:g} matches per record, "
                              f"{bound * float(counts.sum()):,.0f} matches): the fit wanted more, which is what "
                              "a match class that looks like the non-matches does; check the links")
    return model


def _strata_of(G: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, pd.Series]:
    """Each pattern's stratum number, and the pairs per stratum indexed by its ``evidence_strata`` key."""
    number, keys = pd.factorize(evidence_strata(G))
    return number, pd.Series(np.bincount(number, weights=counts, minlength=len(keys)), index=np.asarray(keys))


def _stratum_shares(classes: list[str], shares: dict[str, float], match_share: np.ndarray) -> np.ndarray:
    """Classes x strata: the match share of each stratum, the other classes in their overall mix."""
    others = np.array([0.0 if k == MATCH else shares[k] for k in classes])
    out = np.outer(others / others.sum(), 1.0 - match_share)
    out[classes.index(MATCH)] = match_share
    return out


def _apart_as_random(counts: np.ndarray, random_profile: np.ndarray, apart: int) -> np.ndarray:
    """Counts whose "different" and "different, records years apart" levels are split as among random
    pairs: whether two records are years apart does not depend on whether the two people are
    relatives or neighbours, so those classes may not learn it."""
    out = counts.copy()
    unequal = counts[0] + counts[apart]
    share = random_profile[apart] / max(random_profile[0] + random_profile[apart], 1e-12)
    out[apart], out[0] = unequal * share, unequal * (1 - share)
    return out


def _exact_level(ftype: str) -> int:
    """The grade of exact agreement: the last level, or for the joint name field both names
    agreeing (its last level is "first missing, second agrees")."""
    agrees = NAME_BUCKETS.index("agrees")
    return agrees * len(NAME_BUCKETS) + agrees if ftype == NAME_PAIR else _levels(ftype) - 1


def _plausibility(model: ScoreModel) -> list[str]:
    """Estimated m/u that contradict common sense are reported, not silently used."""
    notes = []
    for f in model.fields.values():
        top = _exact_level(f.type)
        if f.m[top] <= f.u[top]:
            notes.append(f"field '{f.name}': exact agreement is not more likely among matches "
                         f"(m={f.m[top]:.3f}, u={f.u[top]:.3f}); it carries no evidence for a link")
    if not model.converged:
        notes.append(f"EM did not converge in {model.iterations} iterations")
    return notes


def _rarity(keys: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """log2(Σp² / p_v): how much rarer than average the agreeing value is (bits), capped at ±6.

    ``codes`` are every record's value codes (-1: missing), ``keys`` the agreeing values' codes."""
    freq = np.bincount(codes[codes >= 0]) / max(int((codes >= 0).sum()), 1)
    mean_share = float((freq ** 2).sum())
    return np.log2(mean_share / np.maximum(freq[keys], 1e-12)).clip(-6.0, 6.0)


def frequency_adjustments(prepared: pd.DataFrame, grades: pd.DataFrame, field_types: dict[str, str],
                          i: np.ndarray, j: np.ndarray) -> dict[str, np.ndarray]:
    """Value-frequency weights for exact agreements (u(v) = u_exact * p_v / Σ p²).

    Person names that are close or equivalent without being equal weigh by the commoner of the
    two values the same way: a typo or nickname of a rare family name is as telling as the name
    itself, while 'Jones' found within 'Smith-Jones' or one letter from 'Jonas' is not (on the
    demo, names-only pairs with the given name exact and the family name close are 95% the same
    person when the family name is rare and 10% when it is among the commonest).

    Frequencies count records, so a person's own duplicates make their name look commoner than
    it is; the cap keeps that (and any other extreme) to at most 6 bits either way.

    Where both person names agree exactly, the pair's name adjustment is the mean of two
    estimates of how rare the full name is: the two fields' adjustments summed, which assume given
    and family names independent and so miss names that go together (several people called
    'James Smith'), and the full name's own rarity (``full_name_rarity``), which sees that but
    rests on a handful of records per name. The mean shrinks the sparse estimate towards the
    smooth one with equal weights (common practice for combining two estimates; not tuned). It
    is returned under the key ``first+second``, the two fields' own adjustments being 0 there.
    """
    out: dict[str, np.ndarray] = {}
    for f, ftype in field_types.items():
        if ftype not in TF_TYPES:
            continue
        g = grades[f].to_numpy(np.int64)
        top = g == len(GRADE_NAMES[ftype]) - 1
        near = (g >= NAME_NEAR) & ~top if ftype == "person_name" else np.zeros(len(g), bool)
        adjust = np.zeros(len(top))
        if top.any() or near.any():
            codes = pd.factorize(prepared[f], use_na_sentinel=True)[0]
            adjust[top] = _rarity(codes[i[top]], codes)
            if near.any():
                a, b = codes[i[near]], codes[j[near]]
                freq = np.bincount(codes[codes >= 0])
                common = np.where(freq[a] >= freq[b], a, b)
                adjust[near] = _rarity(common, codes)
        out[f] = adjust
    names = [f for f, t in field_types.items() if t == "person_name"][:2]
    if len(names) == 2:
        first, second = names
        top = len(GRADE_NAMES["person_name"]) - 1
        both = (grades[first].to_numpy(np.int64) == top) & (grades[second].to_numpy(np.int64) == top)
        if both.any():
            together = full_name_rarity(prepared[first], prepared[second])[i[both]]
            joint = np.zeros(len(both))
            joint[both] = 0.5 * (out[first][both] + out[second][both] + together)
            out[first][both] = out[second][both] = 0.0
            out[f"{first}+{second}"] = joint
    return out


def family_rarity(tf: dict[str, np.ndarray], field_types: dict[str, str]) -> np.ndarray | None:
    """The part of the value-frequency adjustments that relatives share: the second person name's
    (the family name; ``model_grades`` pairs the first two person-name fields in that order)."""
    names = [f for f, t in field_types.items() if t == "person_name"][:2]
    if len(names) < 2 or names[1] not in tf:
        return None
    return tf[names[1]]


def full_name_rarity(first: pd.Series, second: pd.Series) -> np.ndarray:
    """Per record, log2(Σp² / p_v) for its full name v, both parts together (NaN where either is
    missing), capped at ±6 bits like the other value-frequency adjustments."""
    present = (first.notna() & second.notna()).to_numpy()
    names = pd.factorize(pd.MultiIndex.from_arrays([first.fillna(""), second.fillna("")]))[0]
    out = np.full(len(names), np.nan)
    if present.any():
        out[present] = _rarity(names[present], names[present])
    return out


def random_sample(prepared: pd.DataFrame, groups: np.ndarray | None = None) -> pd.DataFrame:
    """The random record pairs that estimate u and stand for the pairs blocking did not propose
    (every engine draws the same ones)."""
    return random_pairs(len(prepared), RANDOM_PAIRS, groups, hashes=record_hashes(prepared))


def candidate_mask(sample: pd.DataFrame, pairs: pd.DataFrame) -> np.ndarray:
    """Per sampled pair, whether it is among ``pairs`` (either order): such a pair is counted as a
    candidate already, so it must not stand for background pairs as well."""
    if len(pairs) == 0 or len(sample) == 0:
        return np.zeros(len(sample), bool)
    i, j = pairs["i"].to_numpy(np.int64), pairs["j"].to_numpy(np.int64)
    size = int(max(i.max(), j.max(), sample["j"].max(), sample["i"].max())) + 1
    a, b = sample["i"].to_numpy(np.int64), sample["j"].to_numpy(np.int64)
    drawn = np.minimum(a, b) * size + np.maximum(a, b)
    # each candidate looked up among the sorted sample (tens of millions of candidates against a
    # hundred thousand drawn pairs: no sort of the candidates, which took a minute at 300,000 people)
    ordered = np.sort(drawn)
    known = np.minimum(i, j) * size + np.maximum(i, j)
    at = np.minimum(np.searchsorted(ordered, known), len(ordered) - 1)
    return np.isin(drawn, known[ordered[at] == known])


def score(prepared: pd.DataFrame, pairs: pd.DataFrame, canonical: CanonicalSchema,
          *, groups: np.ndarray | None = None, thresholds: Thresholds | None = None,
          grades: pd.DataFrame | None = None, estimator: Callable[..., ScoreModel] | None = None,
          model: ScoreModel | None = None) -> tuple[pd.DataFrame, ScoreModel]:
    """Grades, weights, match probability and decision for every candidate pair.

    ``model``: score with this model (an earlier run's) instead of estimating one.

    Returns:
        (scored pairs: the input columns + ``g_<field>`` grades + ``w_<field>`` weights +
        ``weight``, ``probability``, ``decision``; the estimated model)
    """
    thresholds = thresholds or canonical.thresholds
    if grades is None:
        grades = compare(prepared, pairs, canonical)
    field_types = {f: canonical.fields[f].type for f in grades.columns}
    if model is not None:
        return weigh(prepared, pairs, grades, field_types, model, thresholds), model
    joint, types = model_grades(grades, field_types)
    sample = random_sample(prepared, groups)
    random_joint, _ = model_grades(compare(prepared, sample, canonical), field_types)
    u_random = {f: _level_freq(random_joint[f].to_numpy(np.int64), _levels(types[f])) for f in joint.columns}
    if len(joint):
        n_other = max(all_pairs_count(len(prepared), groups) - len(joint), 0)
        background = random_joint[~candidate_mask(sample, pairs)].reset_index(drop=True)
        # a run with review decisions passes its own estimator (integrate.review.learn), which
        # also sees the pairs so it can hold decided pairs to their decision
        fit = estimate if estimator is None else partial(estimator, pairs)
        model = fit(joint, types, u_random, background, n_other / max(len(background), 1), records=len(prepared))
    else:
        theta, shares, _ = _initial_classes(types, u_random)
        model = ScoreModel({f: FieldModel(f, types[f], theta[MATCH][f].tolist(), u_random[f].tolist(),
                                          u_random[f].tolist()) for f in joint.columns},
                           shares[MATCH], 0, True, shares, _theta=theta)
    return weigh(prepared, pairs, grades, field_types, model, thresholds), model


def weigh(prepared: pd.DataFrame, pairs: pd.DataFrame, grades: pd.DataFrame, field_types: dict[str, str],
          model: ScoreModel, thresholds: Thresholds) -> pd.DataFrame:
    """Weights, match probability and decision of pairs under an estimated model.

    Returns the pairs plus ``g_<field>`` grades, ``w_<field>`` weights of the model's fields,
    ``tf_<field>`` value-frequency adjustments, ``weight``, ``prior_weight`` (the log2 prior odds of
    the pair's evidence stratum), ``probability`` and ``decision``.
    """
    joint, _ = model_grades(grades, field_types)
    out = pairs.copy()
    names = list(joint.columns)
    i = pairs["i"].to_numpy()
    tf = frequency_adjustments(prepared, grades, field_types, i, pairs["j"].to_numpy())
    rarity = np.zeros(len(pairs))
    for column, adjust in tf.items():
        rarity += adjust
        out["tf_" + column] = adjust.astype(np.float32)
    if len(joint):
        columns = [joint[f].to_numpy() for f in names]
        codes = column_pattern_codes(columns, len(joint))
        representative = np.empty(codes.max() + 1, np.int64)
        representative[codes] = np.arange(len(codes))  # any row of a pattern stands for it
        patterns = _rows(columns, representative)
        per_pattern = model.class_log_likelihoods(patterns, names)
        prior = model.prior_weights(patterns)[codes]
        shared = family_rarity(tf, field_types)
        # pair by pair from the patterns' likelihoods, a slice at a time: the per-class arrays of
        # every pair at once cost some 100 bytes a pair
        total = np.empty(len(codes))
        for start in range(0, len(codes), WEIGH_SLICE):
            part = slice(start, start + WEIGH_SLICE)
            total[part] = model.weigh_classes({k: v[codes[part]] for k, v in per_pattern.items()}, rarity[part],
                                              None if shared is None else shared[part])
    else:
        total = prior = np.zeros(0)
    for f, fm in model.fields.items():
        g = joint[f].to_numpy(np.int64)
        table = np.asarray(fm.weights)
        out["w_" + f] = np.where(g == MISSING, 0.0, table[np.clip(g, 0, None)]).astype(np.float32)
    for f in field_types:
        out["g_" + f] = grades[f].to_numpy()
    out["weight"] = total
    out["prior_weight"] = prior.astype(np.float32)
    out["probability"] = 1.0 / (1.0 + np.exp2(-(total + prior)))
    out["decision"] = decisions(out["probability"].to_numpy(), thresholds)
    return out


def decisions(probability: np.ndarray, thresholds: Thresholds) -> np.ndarray:
    """``LINK`` from the link threshold up, ``POSSIBLE`` from the review threshold, else
    ``NON_LINK``: an object array holding the three label strings themselves (no string made per
    pair, as np.select's fixed-width text array and its conversion made)."""
    level = np.where(probability >= thresholds.link, 2, np.where(probability >= thresholds.review, 1, 0))
    return np.array([NON_LINK, POSSIBLE, LINK], dtype=object)[level]
