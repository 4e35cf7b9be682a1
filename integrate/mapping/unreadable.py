"""Too many unreadable values in one column: a mapping that is wrong, not a few bad cells.

A column whose values mostly fail to read (a decimal-comma column read with the default number
format, dates in another layout) would otherwise leave most of its field empty with only a
warning. Above a share of its non-empty values (``max_unreadable``, default 5%) the run stops and
``check`` reports an error, naming the column, the count and three examples; below it the
values stay in ``failures.csv``.
"""

from __future__ import annotations

import pandas as pd

from ..errors import InputError
from .numbers import DEFAULT, detect_number_format
from .spec import SourceMapping

_NUMBER_REASONS = frozenset({"bad_amount", "bad_number"})


def unreadable_problems(raw: pd.DataFrame, failures: pd.DataFrame, mapping: SourceMapping, data_file: str,
                        limit: float) -> list[InputError]:
    """One error per column whose failed share of non-empty values is above ``limit``."""
    if failures.empty:
        return []
    problems: list[InputError] = []
    for column, group in failures.groupby("column", sort=False):
        column = str(column)
        if column not in raw:
            continue
        text = raw[column].astype("string").str.strip()
        present = int((text.notna() & text.ne("")).sum())
        rows = group.drop_duplicates("row")
        if not present or len(rows) / present <= limit:
            continue
        examples = ", ".join(f"'{v}'" for v in rows["value"].drop_duplicates().head(3))
        hint = (f"fix the column's mapping (format, unit, number_format, values), or raise 'max_unreadable' "
                f"(now {limit:g}) to keep going with them left empty")
        if set(rows["reason"]) & _NUMBER_REASONS:
            entry = mapping.column_maps().get(column)
            declared = (entry.number_format if entry else None) or mapping.number_format or DEFAULT
            found, share = detect_number_format(text)
            if found != declared and share > 0.5:
                hint = f"the values read as numbers written '{found}': give the column number_format: \"{found}\""
        problems.append(InputError(
            f"{len(rows)} of {present} values ({len(rows) / present:.0%}) cannot be read, more than the "
            f"{limit:.0%} allowed; e.g. {examples} ({rows['reason'].iloc[0]})",
            file=data_file, line=int(rows["row"].iloc[0]), column=column, value=str(rows["value"].iloc[0]),
            reason="too_many_unreadable", hint=hint,
        ))
    return problems

