"""Compare candidate pairs field by field into agreement grades.

A grade is a small integer per pair and field: -1 means a value is missing on either side (neutral),
0 means different, and higher numbers mean closer agreement. ``GRADE_NAMES`` names the levels of
each field type. String similarities come from rapidfuzz, once per distinct pair of values.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd
from rapidfuzz import process
from rapidfuzz.distance import OSA, JaroWinkler

from .mapping.spec import CanonicalSchema
from .standardise import DAY, MONTH, ROOT_SUFFIX, YEAR

MISSING = -1

# Level names per field type, indexed by grade (0 = different).
GRADE_NAMES: dict[str, list[str]] = {
    "person_name": ["different", "fairly close", "close", "equivalent", "exact"],
    "date": ["different", "same year, rest differs", "year agrees (one side has the year only)",
             "one part differs", "day/month swapped", "exact"],
    "email": ["different", "one edit apart", "exact"],
    "phone": ["different", "one edit apart", "exact"],
    "postcode": ["different", "one edit apart", "exact"],
    "identifier": ["different", "one edit apart", "exact"],
    "text": ["different", "fairly close", "close", "exact"],
    "category": ["different", "exact"],
    "quantity": ["different", "within 5%", "within 1%"],
    "money": ["different", "within 5%", "within 1%"],
}

# Two person-name fields (given and family name) are scored jointly: among candidate pairs found
# by name-based blocking, agreement on one name is far from independent of agreement on the other.
NAME_PAIR = "name_pair"
_NAME_BUCKETS = ["differs", "close", "agrees", "missing"]
GRADE_NAMES[NAME_PAIR] = [f"first {a}, second {b}" for a in _NAME_BUCKETS for b in _NAME_BUCKETS][:-1]


def name_pair_grades(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """Joint grade of two person-name grades: 4 x 4 buckets (differs, close, agrees, missing),
    missing only when both are missing."""

    def bucket(g: np.ndarray) -> np.ndarray:
        return np.select([g < 0, g >= 3, g >= 1], [3, 2, 1], 0)

    joint = bucket(first) * 4 + bucket(second)
    return np.where(joint == 15, MISSING, joint)


# Jaro–Winkler cut-offs for "close" and "fairly close" (Winkler's comparator; 0.92 / 0.80 are
# common practice for names, e.g. DWAYNE/DUANE 0.840 is fairly close, MARTHA/MARHTA 0.961 close).
JW_CLOSE = 0.92
JW_FAIR = 0.80


def grade_name(ftype: str, grade: int) -> str:
    return "missing" if grade < 0 else GRADE_NAMES[ftype][grade]


def pair_scores(a: pd.Series, b: pd.Series, scorer: Callable[..., float]) -> np.ndarray:
    """Score aligned value pairs, once per distinct (a, b); NaN where either is missing."""
    both = a.notna().to_numpy() & b.notna().to_numpy()
    out = np.full(len(a), np.nan)
    if not both.any():
        return out
    left = a.to_numpy(dtype=object)[both]
    right = b.to_numpy(dtype=object)[both]
    keys = pd.Series(left).str.cat(pd.Series(right), sep="\x1f")
    codes, uniques = pd.factorize(keys)
    first = pd.Series(np.arange(len(codes))).groupby(codes).first().to_numpy()
    scores = process.cpdist(left[first].tolist(), right[first].tolist(), scorer=scorer, workers=-1)
    out[both] = np.asarray(scores, dtype=float)[codes]
    return out


def _take(prepared: pd.DataFrame, column: str, idx: np.ndarray) -> pd.Series:
    return prepared[column].iloc[idx].reset_index(drop=True)


def _equal(a: pd.Series, b: pd.Series) -> np.ndarray:
    return (a == b).fillna(False).to_numpy(dtype=bool)


def _missing(a: pd.Series, b: pd.Series) -> np.ndarray:
    return (a.isna() | b.isna()).to_numpy()


def _edit_grades(a: pd.Series, b: pd.Series) -> np.ndarray:
    dist = pair_scores(a, b, OSA.distance)
    grade = np.where(_equal(a, b), 2, np.where(dist <= 1, 1, 0))
    return np.where(_missing(a, b), MISSING, grade)


def _name_grades(prepared: pd.DataFrame, name: str, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    a, b = _take(prepared, name, i), _take(prepared, name, j)
    jw = pair_scores(a, b, JaroWinkler.normalized_similarity)
    first_a = a.str.split(" ", n=1).str[0]
    first_b = b.str.split(" ", n=1).str[0]
    same_root = _equal(_take(prepared, name + ROOT_SUFFIX, i), _take(prepared, name + ROOT_SUFFIX, j))
    grade = np.select(
        [_equal(a, b), same_root | _equal(first_a, first_b), jw >= JW_CLOSE, jw >= JW_FAIR],
        [4, 3, 2, 1],
        0,
    )
    return np.where(_missing(a, b), MISSING, grade)


def _date_grades(prepared: pd.DataFrame, name: str, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    ya, yb = (_take(prepared, name + YEAR, x) for x in (i, j))
    ma, mb = (_take(prepared, name + MONTH, x) for x in (i, j))
    da, db = (_take(prepared, name + DAY, x) for x in (i, j))
    full = (ma.notna() & mb.notna()).to_numpy()
    same_y, same_m, same_d = _equal(ya, yb), _equal(ma, mb), _equal(da, db)
    swapped = same_y & _equal(ma, db) & _equal(da, mb)
    agree_parts = same_y.astype(int) + same_m.astype(int) + same_d.astype(int)
    grade = np.select(
        [full & same_y & same_m & same_d, full & swapped, full & (agree_parts == 2), ~full & same_y, same_y],
        [5, 4, 3, 2, 1],
        0,
    )
    return np.where((ya.isna() | yb.isna()).to_numpy(), MISSING, grade)


def _text_grades(a: pd.Series, b: pd.Series) -> np.ndarray:
    jw = pair_scores(a, b, JaroWinkler.normalized_similarity)
    grade = np.select([_equal(a, b), jw >= JW_CLOSE, jw >= JW_FAIR], [3, 2, 1], 0)
    return np.where(_missing(a, b), MISSING, grade)


def _quantity_grades(a: pd.Series, b: pd.Series) -> np.ndarray:
    x, y = a.to_numpy(dtype=float), b.to_numpy(dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.abs(x - y) / np.maximum(np.abs(x), np.abs(y))
    rel = np.where((x == 0) & (y == 0), 0.0, rel)
    grade = np.select([rel <= 0.01, rel <= 0.05], [2, 1], 0)
    return np.where(np.isnan(x) | np.isnan(y), MISSING, grade)


def _swap_names(grades: dict[str, np.ndarray], prepared: pd.DataFrame, names: list[str],
                i: np.ndarray, j: np.ndarray) -> None:
    """Given and family name written the wrong way round count as equivalent on both fields."""
    first, second = names[:2]
    a1, a2 = _take(prepared, first, i), _take(prepared, second, i)
    b1, b2 = _take(prepared, first, j), _take(prepared, second, j)
    crossed = _equal(a1, b2) & _equal(a2, b1) & ~_equal(a1, a2)
    for name in (first, second):
        grades[name] = np.where(crossed, np.maximum(grades[name], 3), grades[name])


def compare(prepared: pd.DataFrame, pairs: pd.DataFrame, canonical: CanonicalSchema) -> pd.DataFrame:
    """Agreement grades for every candidate pair and compared field.

    Returns:
        A frame aligned with ``pairs`` with one int8 column per compared field.

    Example:
        >>> import pandas as pd
        >>> from integrate.mapping.spec import CanonicalSchema
        >>> schema = CanonicalSchema(fields={"email": {"type": "email", "meaning": "Contact e-mail address."}})
        >>> prepared = pd.DataFrame({"email": ["a@x.org", "a@x.org", "b@x.org"]})
        >>> compare(prepared, pd.DataFrame({"i": [0, 0], "j": [1, 2]}), schema)["email"].tolist()
        [2, 1]
    """
    i = pairs["i"].to_numpy()
    j = pairs["j"].to_numpy()
    grades: dict[str, np.ndarray] = {}
    names: list[str] = []
    for name, spec in canonical.fields.items():
        if not spec.is_compared():
            continue
        if spec.type == "person_name":
            grades[name] = _name_grades(prepared, name, i, j)
            names.append(name)
        elif spec.type == "date":
            grades[name] = _date_grades(prepared, name, i, j)
        elif spec.type in ("email", "phone", "postcode", "identifier"):
            grades[name] = _edit_grades(_take(prepared, name, i), _take(prepared, name, j))
        elif spec.type in ("quantity", "money"):
            grades[name] = _quantity_grades(_take(prepared, name, i), _take(prepared, name, j))
        elif spec.type == "category":
            a, b = _take(prepared, name, i), _take(prepared, name, j)
            grades[name] = np.where(_missing(a, b), MISSING, _equal(a, b).astype(int))
        else:
            grades[name] = _text_grades(_take(prepared, name, i), _take(prepared, name, j))
    if len(names) >= 2:
        _swap_names(grades, prepared, names, i, j)
    return pd.DataFrame({k: v.astype(np.int8) for k, v in grades.items()}, index=pairs.index)
