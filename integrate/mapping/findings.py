"""What ``integrate check`` reports: findings with a level, a stable code and the place they point at."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Literal

import pandas as pd

from ..errors import InputError

Level = Literal["error", "warning", "note"]
LEVELS: tuple[Level, ...] = ("error", "warning", "note")

EXIT_CLEAN = 0  # nothing to report, or notes only
EXIT_WARNINGS = 1  # warnings, no errors: a run would go through, but look first
EXIT_ERRORS = 2  # a run would stop (same code as any input error on the command line)

SHOWN_ROWS = 5  # row numbers listed in a finding before "and N more"


@dataclass(frozen=True)
class Finding:
    """One problem or observation, pointing at a mapping file (line:column) or a data file (row, column).

    ``code`` is stable (``unmapped_column``, ``out_of_range``, ``unit_mislabelled``...), for
    grouping; ``message`` says what was found and what was expected.
    """

    level: Level
    code: str
    message: str
    file: str | None = None
    line: int | None = None
    column: int | str | None = None
    source: str | None = None
    hint: str | None = None

    def __str__(self) -> str:
        where = InputError(self.message, file=self.file, line=self.line, column=self.column, hint=self.hint)
        return str(where)

    @classmethod
    def from_error(cls, error: InputError, source: str | None = None, level: Level = "error") -> Finding:
        return cls(level, error.reason, error.message, error.file, error.line, error.column, source, error.hint)


@dataclass
class CheckReport:
    """Everything ``check`` found, plus the meanings table (which columns feed which field)."""

    findings: list[Finding] = field(default_factory=list)
    meanings: pd.DataFrame = field(default_factory=pd.DataFrame)
    records: dict[str, int] = field(default_factory=dict)  # records read per source
    linked_from: str | None = None  # crosswalk used for the linked-duplicates comparison

    def add(self, findings: Iterable[Finding]) -> None:
        self.findings.extend(findings)

    def of_level(self, level: Level) -> list[Finding]:
        return [f for f in self.findings if f.level == level]

    def codes(self) -> set[str]:
        return {f.code for f in self.findings}

    def exit_code(self) -> int:
        if self.of_level("error"):
            return EXIT_ERRORS
        if self.of_level("warning"):
            return EXIT_WARNINGS
        return EXIT_CLEAN


def rows_text(rows: pd.Series | list[int], total: int | None = None) -> str:
    """'rows 4, 9, 12' or 'rows 4, 9, 12, 15, 20 and 31 more' (first few, then a count).

    Example:
        >>> rows_text([4, 9, 12, 15, 20, 22, 23], 7)
        'rows 4, 9, 12, 15, 20 and 2 more'
        >>> rows_text([7])
        'row 7'
    """
    listed = [int(r) for r in list(rows)[:SHOWN_ROWS]]
    count = len(list(rows)) if total is None else total
    text = ("row " if count == 1 else "rows ") + ", ".join(str(r) for r in listed)
    if count > len(listed):
        text += f" and {count - len(listed)} more"
    return text
