"""Why two records were (or were not) linked: each field's values, grade and weight, and the total."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .columns import RECORD_ID, SOURCE
from .compare import NAME_PAIR, compare, grade_name, name_pair_grades
from .errors import InputError
from .mapping.spec import CanonicalSchema
from .matching import MatchResult
from .score import weigh


@dataclass
class Explanation:
    """One pair's comparison, field by field."""

    record_a: str
    record_b: str
    table: pd.DataFrame  # field, value_a, value_b, grade, weight (bits)
    total_weight: float
    prior_weight: float  # log2 prior odds of the pair's evidence stratum
    probability: float
    decision: str
    candidate: bool  # whether blocking proposed the pair


def find_record(records: pd.DataFrame, reference: str) -> int:
    """Position of the record named ``source:record_id``."""
    source, sep, record_id = reference.partition(":")
    if not sep:
        raise InputError(f"'{reference}' does not name a record", value=reference, reason="bad_record_reference",
                         hint="write SOURCE:RECORD_ID, e.g. webshop:W100234")
    hits = np.flatnonzero((records[SOURCE].astype(str) == source).to_numpy()
                          & (records[RECORD_ID].astype(str) == record_id).to_numpy())
    if len(hits) == 0:
        sources = ", ".join(sorted(records[SOURCE].astype(str).unique()))
        raise InputError(f"no record '{record_id}' in source '{source}'", value=reference, reason="unknown_record",
                         hint=f"sources: {sources}")
    return int(hits[0])


def explain_pair(records: pd.DataFrame, match: MatchResult, canonical: CanonicalSchema,
                 reference_a: str, reference_b: str) -> Explanation:
    """Compare two records exactly as the run did and say what each field contributed."""
    a, b = find_record(records, reference_a), find_record(records, reference_b)
    if a == b:
        raise InputError(f"'{reference_a}' is compared with itself", value=reference_a, reason="same_record",
                         hint="name two different records: explain SOURCE:ID SOURCE:ID")
    i, j = min(a, b), max(a, b)  # the pair as blocking and scoring see it; values are shown as given
    pair = pd.DataFrame({"i": [i], "j": [j], "rules": [0]})
    grades = compare(match.prepared, pair, canonical)
    field_types = {f: canonical.fields[f].type for f in grades.columns}
    scored = weigh(match.prepared, pair, grades, field_types, match.model, canonical.thresholds).iloc[0]
    rows = []
    for field, ftype in field_types.items():
        g = int(grades[field].iloc[0])
        weight = scored.get("w_" + field, np.nan)
        rows.append({"field": field, "value_a": records[field].iloc[a], "value_b": records[field].iloc[b],
                     "grade": grade_name(ftype, g), "weight": float(weight) if pd.notna(weight) else np.nan})
        if "tf_" + field in scored and scored["tf_" + field] != 0:
            rows.append({"field": f"{field} (value frequency)", "value_a": "", "value_b": "",
                         "grade": "", "weight": float(scored["tf_" + field])})
    for column in scored.index:
        if column.startswith("w_") and "+" in column:
            first, second = column[2:].split("+")
            joint = int(name_pair_grades(grades[first].to_numpy(), grades[second].to_numpy())[0])
            rows.append({"field": f"{first} + {second} (scored together)", "value_a": "", "value_b": "",
                         "grade": grade_name(NAME_PAIR, joint), "weight": float(scored[column])})
            together = scored.get("tf_" + column[2:], 0.0)
            if together != 0:
                rows.append({"field": "full name (value frequency)", "value_a": "",
                             "value_b": "", "grade": "", "weight": float(together)})
    candidate = bool(((match.pairs["i"] == i) & (match.pairs["j"] == j)).any())
    return Explanation(reference_a, reference_b, pd.DataFrame(rows), float(scored["weight"]),
                       float(scored["prior_weight"]), float(scored["probability"]), str(scored["decision"]), candidate)
