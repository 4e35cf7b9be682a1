"""Compare candidate pairs field by field into agreement grades.

A grade is a small integer per pair and field: -1 means a value is missing on either side (neutral),
0 means different, and higher numbers mean closer agreement. ``GRADE_NAMES`` names the levels of
each field type. String similarities come from rapidfuzz, once per distinct pair of values.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import cached_property

import numpy as np
import pandas as pd
from rapidfuzz import process
from rapidfuzz.distance import OSA, JaroWinkler

from .mapping.spec import CanonicalSchema
from .standardise import DAY, FIRST_WORD, MONTH, OTHER_ROOT, RECORD_DAY, ROOT_SUFFIX, YEAR
from .text_normalise import given_name_forms

MISSING = -1

# Contact details change: people move and change numbers and addresses. Two records dated this
# many days apart that differ on one get a grade of their own, which EM weighs apart from a
# difference between records of about the same time (on the demo, a true pair's postcode differs
# in 0-3% of pairs under four years apart and in 14% of those over eight; F1 moved by under
# 0.0005 for any cut-off from two to six years, so this is not a tuned value).
APART_DAYS = 2 * 365
APART = "different, records years apart"
CONTACT_CHANGES = frozenset({"email", "phone", "postcode"})

# Level names per field type, indexed by grade (0 = different).
GRADE_NAMES: dict[str, list[str]] = {
    "person_name": ["different", "fairly close", "close", "equivalent", "exact"],
    "date": ["different", "same year, rest differs", "year agrees (one side has the year only)",
             "one part differs", "day/month swapped", "exact"],
    "email": ["different", APART, "one edit apart", "exact"],
    "phone": ["different", APART, "one edit apart", "exact"],
    "postcode": ["different", APART, "one edit apart", "exact"],
    "identifier": ["different", "one edit apart", "exact"],
    "text": ["different", "fairly close", "close", "exact"],
    "category": ["different", "exact"],
    "quantity": ["different", "within 5%", "within 1%"],
    "money": ["different", "within 5%", "within 1%"],
}

# Two person-name fields (given and family name) are scored jointly: among candidate pairs found
# by name-based blocking, agreement on one name is far from independent of agreement on the other.
NAME_PAIR = "name_pair"
# "Fairly close" has a bucket of its own: among names-only pairs it is mostly two relatives'
# different names ('Karen' / 'Katherine', 'Paul' / 'Pauline'), while "close" is mostly a typo.
NAME_BUCKETS = ["differs", "fairly close", "close", "agrees", "missing"]
GRADE_NAMES[NAME_PAIR] = [f"first {a}, second {b}" for a in NAME_BUCKETS for b in NAME_BUCKETS][:-1]


def name_bucket(grade: np.ndarray) -> np.ndarray:
    """A person-name grade's bucket: its index in ``NAME_BUCKETS`` (equivalent and exact agree)."""
    return np.select([grade < 0, grade >= 3, grade == 2, grade == 1], [4, 3, 2, 1], 0)


def name_pair_grades(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """Joint grade of two person-name grades: first bucket x 5 + second bucket (``NAME_BUCKETS``),
    missing only when both are missing."""
    size = len(NAME_BUCKETS)
    joint = name_bucket(first) * size + name_bucket(second)
    return np.where(joint == size * size - 1, MISSING, joint)


# Jaro–Winkler cut-offs for "close" and "fairly close" (Winkler's comparator; 0.92 / 0.80 are
# common practice for names, e.g. DWAYNE/DUANE 0.840 is fairly close, MARTHA/MARHTA 0.961 close).
JW_CLOSE = 0.92
JW_FAIR = 0.80
# Two similar spellings are two names in use, not a slip, when each is held by several records.
# A given slip of a name held by n records recurs about n * (slip rate) / (possible slips of the
# name) times, some n / 1000 for slip rates of a few per cent and a few dozen possible slips
# (common practice, estimated from memory, not published constants); so the rarer spelling must
# be held by 3 records and by 1% of the commoner spelling's records, which keeps both figures
# above what slips reach in a large data set.
ESTABLISHED = 3
ESTABLISHED_SHARE = 0.01


def established(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Whether two names held by ``a`` and ``b`` records are both names in use (see
    ``Coded.both_established``). The only way comparison depends on other records: an
    incremental run (incremental.py) recompares a stored pair where this answer changed."""
    low, high = np.minimum(a, b), np.maximum(a, b)
    return (low >= ESTABLISHED) & (low >= ESTABLISHED_SHARE * high)


def rare_words(counts: np.ndarray) -> np.ndarray:
    """Whether first words held by ``counts`` records are too rare to be names in use (slips)."""
    return counts < ESTABLISHED


def grade_name(ftype: str, grade: int) -> str:
    return "missing" if grade < 0 else GRADE_NAMES[ftype][grade]


def _distinct_pairs(a: np.ndarray, b: np.ndarray, size: int) -> tuple[np.ndarray, list[int], list[int]]:
    """Code pairs (a, b), codes in 0..size-1, as (each pair's number among the distinct pairs, the
    distinct pairs' left codes, their right codes): work done once per distinct pair is spread
    back with ``result[inverse]``."""
    keys = a.astype(np.int64) * (size + 1) + b
    inverse, unique = pd.factorize(keys)
    return inverse, (unique // (size + 1)).tolist(), (unique % (size + 1)).tolist()


class Coded:
    """One prepared column as integer codes (-1 = missing) plus its distinct values.

    Equality and missingness of millions of pairs become integer comparisons, and string
    similarities are computed once per distinct pair of codes.
    """

    def __init__(self, values: pd.Series) -> None:
        self.codes, uniques = pd.factorize(values, use_na_sentinel=True)
        self.values = np.asarray(uniques, dtype=object)

    @cached_property
    def _several(self) -> np.ndarray:
        return np.array([" " in v for v in self.values.tolist()] + [False])  # last: missing (-1)

    @cached_property
    def counts(self) -> np.ndarray:
        """How many records hold each value (by code; the last entry, for missing, is 0)."""
        return np.append(np.bincount(self.codes[self.codes >= 0], minlength=len(self.values)), 0)

    def both_established(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        """Whether both values are names in use rather than one-off slips: the rarer is held by at
        least ``ESTABLISHED`` records and by at least ``ESTABLISHED_SHARE`` of the commoner's count
        (False where either is missing)."""
        return established(self.counts[self.codes[i]], self.counts[self.codes[j]])

    def several_words(self, i: np.ndarray) -> np.ndarray:
        """Whether record i's value has more than one word (False where missing)."""
        return self._several[self.codes[i]]

    def equal(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        a, b = self.codes[i], self.codes[j]
        return (a == b) & (a >= 0)

    def missing(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        return (self.codes[i] < 0) | (self.codes[j] < 0)

    def scores(self, i: np.ndarray, j: np.ndarray, scorer: Callable[..., float], *,
               where: np.ndarray | None = None, **options: float) -> np.ndarray:
        """``scorer`` of every pair's two values, once per distinct pair; NaN where one is missing
        or ``where`` is False (pairs whose grade is settled without it). ``options`` go to the
        scorer (e.g. ``score_cutoff``)."""
        a, b = self.codes[i], self.codes[j]
        both = (a >= 0) & (b >= 0)
        if where is not None:
            both &= where
        out = np.full(len(a), np.nan)
        if not both.any():
            return out
        inverse, left, right = _distinct_pairs(a[both], b[both], len(self.values))
        scores = process.cpdist(self.values[left].tolist(), self.values[right].tolist(), scorer=scorer,
                                workers=-1, **options)
        out[both] = np.asarray(scores, dtype=float)[inverse]
        return out

    @cached_property
    def form_slips(self) -> tuple[list[frozenset[str]], np.ndarray]:
        """For first words of given names: the formal names each can stand for, a slip undone
        (see ``_slip_of_a_form``), and whether it is such a slip (by code; the last entry, for
        missing, is False)."""
        forms = given_name_forms()
        table = list(forms)
        words = self.values.tolist()
        rare = rare_words(self.counts[:-1])
        reach: list[frozenset[str]] = [frozenset(forms.get(w, (w,))) for w in words]
        slips = [k for k, w in enumerate(words) if rare[k] and w not in forms and len(w) >= 3]
        if slips and table:
            near = process.cdist([words[k] for k in slips], table, scorer=OSA.distance, score_cutoff=1,
                                 workers=-1) <= 1
            for row, k in enumerate(slips):
                for column in np.flatnonzero(near[row]).tolist():
                    reach[k] = reach[k] | frozenset(forms[table[column]])
        slipped = np.zeros(len(words) + 1, bool)  # the last entry: missing
        slipped[[k for k in slips if len(reach[k]) > 1]] = True
        return reach, slipped

    @cached_property
    def _words(self) -> tuple[list[frozenset[str]], np.ndarray, np.ndarray]:
        """Each value's set of words, whether it has one word only, and a code of that word."""
        words = [frozenset(v.split()) for v in self.values.tolist()]
        single = np.array([len(w) == 1 for w in words] + [False])
        word_code = np.append(pd.factorize(np.array([next(iter(w)) if len(w) == 1 else None for w in words],
                                                    dtype=object))[0], -1)
        return words, single, word_code

    def words_within(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        """Whether all words of one value are among the other's ('smith jones' / 'jones').

        The same as rapidfuzz's token_set_ratio reaching 100, without scoring: two one-word
        values compare by their word, and only pairs with a longer value compare word sets.
        """
        words, single, word_code = self._words
        a, b = self.codes[i], self.codes[j]
        out = single[a] & single[b] & (word_code[a] == word_code[b])
        longer = (a >= 0) & (b >= 0) & ~(single[a] & single[b])
        if longer.any():
            inverse, left, right = _distinct_pairs(a[longer], b[longer], len(self.values))
            within = [bool(x and y and (x <= y or y <= x)) for x, y in
                      zip((words[k] for k in left), (words[k] for k in right))]
            out[longer] = np.asarray(within, dtype=bool)[inverse]
        return out


def pair_scores(a: pd.Series, b: pd.Series, scorer: Callable[..., float]) -> np.ndarray:
    """Score aligned value pairs, once per distinct (a, b); NaN where either is missing."""
    coded = Coded(pd.concat([a, b], ignore_index=True))
    n = len(a)
    return coded.scores(np.arange(n), np.arange(n, 2 * n), scorer)


class _Columns:
    """Coded columns of the prepared frame, each coded once per comparison run."""

    def __init__(self, prepared: pd.DataFrame, names: list[str]) -> None:
        self.prepared = prepared
        self.names = names  # the person-name fields
        self._coded: dict[str, Coded] = {}
        self._roots: dict[str, np.ndarray] = {}
        self._numbers: dict[str, np.ndarray] = {}
        self._together: dict[tuple[str, str], Coded] = {}

    def roots(self, name: str) -> list[np.ndarray]:
        """Codes of a name field's two formal-name columns, coded together with every other name
        field's so that a given name's formal name can equal a family name's."""
        if not self._roots:
            columns = [f + suffix for f in self.names for suffix in (ROOT_SUFFIX, OTHER_ROOT)]
            coded = Coded(pd.concat([self.prepared[c] for c in columns], ignore_index=True))
            n = len(self.prepared)
            self._roots = {c: coded.codes[k * n:(k + 1) * n] for k, c in enumerate(columns)}
        return [self._roots[name + ROOT_SUFFIX], self._roots[name + OTHER_ROOT]]

    def __getitem__(self, column: str) -> Coded:
        if column not in self._coded:
            self._coded[column] = Coded(self.prepared[column])
        return self._coded[column]

    def numbers(self, column: str) -> np.ndarray:
        if column not in self._numbers:
            self._numbers[column] = pd.to_numeric(self.prepared[column], errors="coerce").to_numpy(
                dtype=float, na_value=np.nan)
        return self._numbers[column]

    def together(self, first: str, second: str) -> Coded:
        """Two columns coded as one (first's records, then second's), so values compare across them."""
        if (first, second) not in self._together:
            self._together[first, second] = Coded(pd.concat([self.prepared[first], self.prepared[second]],
                                                            ignore_index=True))
        return self._together[first, second]


_ACCOUNT_MARKS = frozenset("0123456789._-+")


def _email_slip(a: str, b: str, **_: object) -> float:
    """1.0 when two addresses one edit apart differ by a typing slip, 0.0 when the difference is
    how a second account is told apart: a digit or separator ('l.flores2' / 'l.flores7',
    'ingrid.taylor' / 'ingrid_taylor') or an initial at either end of the local part or next to a
    separator ('smitho' / 'smithm', 'c.hunt' / 'a.hunt'). Local parts are built from names, so
    namesakes' addresses are often one edit apart."""
    if OSA.distance(a, b, score_cutoff=1) > 1:
        return 0.0
    local_a, _, domain_a = a.partition("@")
    local_b, _, domain_b = b.partition("@")
    if local_a == local_b:
        return 1.0  # a slip in the domain
    if domain_a != domain_b:
        return 0.0
    start = 0
    while start < min(len(local_a), len(local_b)) and local_a[start] == local_b[start]:
        start += 1
    end_a, end_b = len(local_a), len(local_b)
    while end_a > start and end_b > start and local_a[end_a - 1] == local_b[end_b - 1]:
        end_a, end_b = end_a - 1, end_b - 1
    changed = set(local_a[start:end_a]) | set(local_b[start:end_b])
    if changed & _ACCOUNT_MARKS:
        return 0.0
    edges = {start - 1, max(end_a, end_b)}  # the characters just outside the changed stretch
    at_edge = start == 0 or max(end_a, end_b) >= max(len(local_a), len(local_b))
    beside_mark = any(0 <= k < len(local_a) and local_a[k] in _ACCOUNT_MARKS for k in edges)
    return 0.0 if at_edge or beside_mark else 1.0


def _edit_grades(col: Coded, i: np.ndarray, j: np.ndarray, *, email: bool = False,
                 apart: np.ndarray | None = None) -> np.ndarray:
    """Exact / one edit apart / different; with ``apart`` (pairs of records years apart), the
    levels of ``CONTACT_CHANGES`` fields, where such pairs that differ get a level of their own."""
    equal = col.equal(i, j)
    if email:
        near = col.scores(i, j, _email_slip, where=~equal) == 1.0
    else:
        near = col.scores(i, j, OSA.distance, where=~equal, score_cutoff=1) <= 1
    if apart is None:
        grade = np.where(equal, 2, np.where(near, 1, 0))
    else:
        grade = np.where(equal, 3, np.where(near, 2, np.where(apart, 1, 0)))
    return np.where(col.missing(i, j), MISSING, grade)


def _years_apart(prepared: pd.DataFrame, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Whether each pair's records are dated at least ``APART_DAYS`` apart (False where unknown)."""
    if RECORD_DAY not in prepared:
        return np.zeros(len(i), bool)
    day = prepared[RECORD_DAY].to_numpy(float)
    with np.errstate(invalid="ignore"):
        return np.abs(day[i] - day[j]) >= APART_DAYS


def _name_grades(cols: _Columns, name: str, i: np.ndarray, j: np.ndarray, *, part_is_close: bool = False
                 ) -> np.ndarray:
    """Grades of one person-name field. ``part_is_close``: one name within the other counts as
    close, not equivalent (family names: 'jones' is within 'smith jones' and within many others)."""
    col, first = cols[name], cols[name + FIRST_WORD]
    equal = col.equal(i, j)
    same_root = _share_a_root(cols, name, name, i, j)
    # the same first word, or one name's words all within the other's: 'anna marie' / 'anna',
    # 'smith jones' / 'jones', 'van der berg' / 'berg'
    partial = first.equal(i, j) | col.words_within(i, j)
    if part_is_close:
        # formal forms are those of first words: for a family name, 'partial' already covers them
        equivalent = same_root & ~partial
    else:
        equivalent = same_root | partial
    rest = ~(equal | equivalent | partial)
    # the whole names, and the first words where a name has several ('bejamin' / 'benjamin rowan')
    by_word = rest & (col.several_words(i) | col.several_words(j))
    jw = np.fmax(col.scores(i, j, JaroWinkler.normalized_similarity, where=rest),
                 first.scores(i, j, JaroWinkler.normalized_similarity, where=by_word))
    # one keystroke apart counts as close however short the name ('km' / 'kim', 'aav' / 'ava'),
    # where Jaro–Winkler's scale is too coarse
    unsure = rest & ~(jw >= JW_CLOSE)
    one_edit = ((col.scores(i, j, OSA.distance, where=unsure, score_cutoff=1) <= 1)
                | (first.scores(i, j, OSA.distance, where=unsure & by_word, score_cutoff=1) <= 1))
    grade = np.select([equal, equivalent, partial | (jw >= JW_CLOSE) | one_edit, jw >= JW_FAIR], [4, 3, 2, 1], 0)
    # Two spellings that each stand on several records are two names in use, not a slip: close
    # ('mark' / 'marek') drops to fairly close, and a formal name and a diminutive that are both
    # common names in their own right ('john' / 'jack', 'eleanor' / 'ellie') drop to close.
    # (On the demo, such close pairs were 0-4% the same person, against 74% for the rest.)
    known = ~partial & col.both_established(i, j)
    grade = np.where(known & ((grade == 2) | (grade == 3)), grade - 1, grade)
    if not part_is_close:
        # the same first word and two different further names ('ryan robert' / 'ryan frederick'): a
        # dropped middle name is the same name ('anna' / 'anna marie'), but a different one is what
        # twins or a parent and child who share a first name look like; fairly close, or close where
        # the whole names are alike (a slip in the middle name: 'mary ann' / 'mary anne')
        other_middle = (first.equal(i, j) & ~equal & col.several_words(i) & col.several_words(j)
                        & ~col.words_within(i, j))
        if other_middle.any():
            alike = col.scores(i, j, JaroWinkler.normalized_similarity, where=other_middle) >= JW_CLOSE
            grade = np.where(other_middle, np.where(alike, 2, 1), grade)
        # a slip on top of a short form ('ndy' / 'Andrew', 'Peggr' / 'Margaret') is close
        unsure = np.flatnonzero((grade == 0) & ~col.missing(i, j))
        grade[unsure[_slip_of_a_form(first, i[unsure], j[unsure])]] = 2
    return np.where(col.missing(i, j), MISSING, grade)


def _slip_of_a_form(first: Coded, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Whether the first words of two given names stand for one formal name once a slip is
    undone: a rare word not in the name table stands for the formal names of the table's names
    one keystroke from it ('ndy' -> 'andy' -> andrew). Worked out once per distinct word."""
    reach, slipped = first.form_slips
    words = first.values
    a, b = first.codes[i], first.codes[j]
    both = (a >= 0) & (b >= 0) & (slipped[a] | slipped[b])
    out = np.zeros(len(i), bool)
    if both.any():
        inverse, left, right = _distinct_pairs(a[both], b[both], len(words))
        out[both] = np.asarray([bool(reach[x] & reach[y]) for x, y in zip(left, right)], bool)[inverse]
    return out


def _date_grades(cols: _Columns, name: str, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    y, m, d = (cols.numbers(name + part) for part in (YEAR, MONTH, DAY))
    ya, yb, ma, mb, da, db = y[i], y[j], m[i], m[j], d[i], d[j]
    full = ~np.isnan(ma) & ~np.isnan(mb)
    same_y, same_m, same_d = ya == yb, ma == mb, da == db
    swapped = same_y & (ma == db) & (da == mb)
    agree_parts = same_y.astype(int) + same_m.astype(int) + same_d.astype(int)
    grade = np.select(
        [full & same_y & same_m & same_d, full & swapped, full & (agree_parts == 2), ~full & same_y, same_y],
        [5, 4, 3, 2, 1],
        0,
    )
    return np.where(np.isnan(ya) | np.isnan(yb), MISSING, grade)


def _text_grades(col: Coded, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    equal = col.equal(i, j)
    jw = col.scores(i, j, JaroWinkler.normalized_similarity, where=~equal)
    grade = np.select([equal, jw >= JW_CLOSE, jw >= JW_FAIR], [3, 2, 1], 0)
    return np.where(col.missing(i, j), MISSING, grade)


def _quantity_grades(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.abs(x - y) / np.maximum(np.abs(x), np.abs(y))
    rel = np.where((x == 0) & (y == 0), 0.0, rel)
    grade = np.select([rel <= 0.01, rel <= 0.05], [2, 1], 0)
    return np.where(np.isnan(x) | np.isnan(y), MISSING, grade)


def _share_a_root(cols: _Columns, field_a: str, field_b: str, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Whether record i's name in field_a and record j's in field_b can stand for one formal name."""
    out = np.zeros(len(i), bool)
    for a in cols.roots(field_a):
        for b in cols.roots(field_b):
            x, y = a[i], b[j]
            out |= (x == y) & (x >= 0)
    return out


def _swap_names(grades: dict[str, np.ndarray], cols: _Columns, names: list[str],
                i: np.ndarray, j: np.ndarray) -> None:
    """Given and family name written the wrong way round count as equivalent on both fields, also
    with a nickname or a small typo on top ('Clark, Kate' / 'Katherine Clark'); as close when one
    of the two crossings is only fairly alike."""
    first, second = names[:2]
    # code both name columns together so that a given name can equal a family name
    both = cols.together(first, second)
    n = len(cols.prepared)

    def alike(x: np.ndarray, y: np.ndarray, x_field: str, y_field: str) -> tuple[np.ndarray, np.ndarray]:
        """(strongly alike: equal, one formal name or close; at least fairly close)"""
        jw = both.scores(x, y, JaroWinkler.normalized_similarity)
        same = both.codes[x] == both.codes[y]
        roots = _share_a_root(cols, x_field, y_field, x % n, y % n)
        present = both.codes[x] >= 0
        return present & (same | roots | (jw >= JW_CLOSE)), present & (jw >= JW_FAIR)

    differ = both.codes[i] != both.codes[i + n]
    strong_1, fair_1 = alike(i, j + n, first, second)
    # the other crossing matters only where this one is alike
    maybe = np.flatnonzero((strong_1 | fair_1) & differ)
    strong_2, fair_2 = np.zeros(len(i), bool), np.zeros(len(i), bool)
    strong_2[maybe], fair_2[maybe] = alike(i[maybe] + n, j[maybe], second, first)
    # both crossed names strongly alike: a swap, equivalent on both fields; one strongly and the
    # other only fairly alike ('Quinn Jones' / 'Jens Quinn', 'Finn Edwards' / 'Edwards, Fiona'):
    # perhaps a swap with a typo, perhaps two people, so close on both
    swapped = strong_1 & strong_2 & differ
    perhaps = ((strong_1 & fair_2) | (fair_1 & strong_2)) & differ & ~swapped
    for name in (first, second):
        grades[name] = np.where(swapped, np.maximum(grades[name], 3),
                                np.where(perhaps, np.maximum(grades[name], 2), grades[name]))


def compare(prepared: pd.DataFrame, pairs: pd.DataFrame, canonical: CanonicalSchema, *,
            columns: _Columns | None = None) -> pd.DataFrame:
    """Agreement grades for every candidate pair and compared field.

    Returns:
        A frame aligned with ``pairs`` with one int8 column per compared field.

    Example:
        >>> import pandas as pd
        >>> from integrate.mapping.spec import CanonicalSchema
        >>> schema = CanonicalSchema(fields={"email": {"type": "email", "meaning": "Contact e-mail address."}})
        >>> prepared = pd.DataFrame({"email": ["maria@x.org", "maria@x.org", "mraia@x.org", "maria2@x.org"]})
        >>> compare(prepared, pd.DataFrame({"i": [0, 0, 0], "j": [1, 2, 3]}), schema)["email"].tolist()
        [3, 2, 0]
    """
    i = pairs["i"].to_numpy()
    j = pairs["j"].to_numpy()
    cols = columns if columns is not None else coded_columns(prepared, canonical)
    grades: dict[str, np.ndarray] = {}
    names: list[str] = []
    for name, spec in canonical.fields.items():
        if not spec.is_compared():
            continue
        if spec.type == "person_name":
            # the second person-name field is the family name (as in the joint name grade)
            grades[name] = _name_grades(cols, name, i, j, part_is_close=len(names) == 1)
            names.append(name)
        elif spec.type == "date":
            grades[name] = _date_grades(cols, name, i, j)
        elif spec.type in ("email", "phone", "postcode", "identifier"):
            apart = _years_apart(prepared, i, j) if spec.type in CONTACT_CHANGES else None
            grades[name] = _edit_grades(cols[name], i, j, email=spec.type == "email", apart=apart)
        elif spec.type in ("quantity", "money"):
            values = cols.numbers(name)
            grades[name] = _quantity_grades(values[i], values[j])
        elif spec.type == "category":
            col = cols[name]
            grades[name] = np.where(col.missing(i, j), MISSING, col.equal(i, j).astype(int))
        else:
            grades[name] = _text_grades(cols[name], i, j)
    if len(names) >= 2:
        _swap_names(grades, cols, names, i, j)
    return pd.DataFrame({k: v.astype(np.int8) for k, v in grades.items()}, index=pairs.index)


def coded_columns(prepared: pd.DataFrame, canonical: CanonicalSchema) -> _Columns:
    """The prepared columns as ``compare`` codes them, to share between calls on one frame."""
    return _Columns(prepared, [n for n, spec in canonical.fields.items()
                               if spec.is_compared() and spec.type == "person_name"])


CHUNK_BYTES_PER_PAIR = 600  # about what comparing one pair holds at once (grades, scores, codes)


def chunk_size(pairs: int, available: int | None = None) -> int:
    """Pairs per chunk: an eighth of the memory available now, within 100,000 and 4,000,000."""
    if available is None:
        import psutil

        available = psutil.virtual_memory().available
    return int(min(max(available // 8 // CHUNK_BYTES_PER_PAIR, 100_000), 4_000_000, max(pairs, 1)))


def compare_in_chunks(prepared: pd.DataFrame, pairs: pd.DataFrame, canonical: CanonicalSchema, *,
                      size: int | None = None, count: Callable[[int, int, str], None] | None = None
                      ) -> pd.DataFrame:
    """``compare`` over fixed-size chunks of the pairs (each pair's grades depend on that pair
    alone), so memory for the work in flight is bounded; ``count(done, total, 'pairs')`` after
    each chunk. A distributed engine can call ``compare`` on its own partitions the same way."""
    size = size or chunk_size(len(pairs))
    if len(pairs) <= size:
        out = compare(prepared, pairs, canonical)
        if count is not None:
            count(len(pairs), len(pairs), "pairs")
        return out
    parts = []
    columns = coded_columns(prepared, canonical)  # coded once: each chunk coded them all again
    for start in range(0, len(pairs), size):
        parts.append(compare(prepared, pairs.iloc[start:start + size], canonical, columns=columns))
        if count is not None:
            count(min(start + size, len(pairs)), len(pairs), "pairs")
    return pd.concat(parts)
