"""Moving decisions between workspaces as CSV: ``integrate review --export`` / ``--import``.

The file has one row per decision: the pair's two records, the decision, who made it and when,
the note, and the scores shown at the time. Importing keeps each decision's reviewer and time; a
pair already decided differently in this workspace is reported as a conflict and left alone.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from ..errors import InputError, InputErrors
from ..outputs.tables import write_text_atomic
from .store import DECISION_COLUMNS, DECISIONS, KEY_COLUMNS, DecisionConflict, DecisionStore, NewDecision

EXPORT_COLUMNS = DECISION_COLUMNS + ["probability", "weight", "run_decision", "origin"]
REQUIRED = KEY_COLUMNS + ["decision", "reviewer"]


@dataclass
class ImportSummary:
    added: int = 0
    unchanged: int = 0  # the same decision was already there
    conflicts: list[dict[str, Any]] = field(default_factory=list)  # existing decisions that differ


def export_decisions(store: DecisionStore, path: str | Path) -> int:
    """Write every standing decision to a CSV file (atomically); returns how many."""
    frame = store.decisions()
    buffer = io.StringIO()
    frame.reindex(columns=EXPORT_COLUMNS).to_csv(buffer, index=False, quoting=csv.QUOTE_MINIMAL)
    write_text_atomic(Path(path), buffer.getvalue())
    return len(frame)


def _number(value: Any) -> float | None:
    if value is None or (isinstance(value, float) and math.isnan(value)) or str(value).strip() == "":
        return None
    return float(value)


def read_decisions_file(path: str | Path) -> pd.DataFrame:
    """Read and check a decisions CSV; every bad row is reported with its line number."""
    path = Path(path)
    if not path.exists():
        raise InputError("file not found", file=str(path), reason="missing_file")
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
    except UnicodeDecodeError as exc:
        data = path.read_bytes()
        line = None
        try:
            data.decode("utf-8")
        except UnicodeDecodeError as bad:  # pandas' error counts from its buffer, not the file
            line = data.count(b"\n", 0, bad.start) + 1
        raise InputError(f"decisions file is not UTF-8 text ({exc.reason})", file=str(path), line=line,
                         reason="bad_encoding", hint="save the file as UTF-8 (the format 'review --export' writes)"
                         ) from exc
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise InputError(f"decisions file cannot be read as CSV: {exc}", file=str(path), reason="bad_csv",
                         hint="use the CSV layout 'review --export' writes") from exc
    missing = [c for c in REQUIRED if c not in frame.columns]
    if missing:
        raise InputError(f"missing columns {missing}", file=str(path), line=1, reason="missing_column",
                         hint=f"a decisions file has columns {', '.join(EXPORT_COLUMNS)}")
    problems: list[InputError] = []
    for column in REQUIRED:
        empty = frame.index[frame[column].str.strip() == ""]
        problems.extend(InputError("empty value", file=str(path), line=int(i) + 2, column=column,
                                   reason="empty_value") for i in empty)
    bad = frame.index[~frame["decision"].isin(DECISIONS)]
    problems.extend(InputError(f"unknown decision '{frame.at[i, 'decision']}'", file=str(path), line=int(i) + 2,
                               column="decision", value=frame.at[i, "decision"], reason="bad_decision",
                               hint="use same, different or defer") for i in bad)
    for column in ("probability", "weight"):
        if column in frame.columns:
            numbers = pd.to_numeric(frame[column].replace("", None), errors="coerce")
            wrong = frame.index[numbers.isna() & (frame[column].str.strip() != "")]
            problems.extend(InputError("not a number", file=str(path), line=int(i) + 2, column=column,
                                       value=frame.at[i, column], reason="bad_number") for i in wrong)
    if problems:
        problems.sort(key=lambda e: (e.line or 0))
        raise problems[0] if len(problems) == 1 else InputErrors(problems)
    return frame


def import_decisions(store: DecisionStore, path: str | Path) -> ImportSummary:
    """Add the decisions of a CSV file to this workspace's store (nothing is overwritten)."""
    frame = read_decisions_file(path)
    summary = ImportSummary()
    for row in frame.to_dict("records"):  # rowwise on purpose: one transaction per decision, small files
        key = tuple(row[c] for c in KEY_COLUMNS)
        existing = store.get(key)  # type: ignore[arg-type]
        if existing is not None and existing["decision"] == row["decision"]:
            summary.unchanged += 1
            continue
        new = NewDecision(
            **{c: row[c] for c in KEY_COLUMNS}, decision=row["decision"], reviewer=row["reviewer"],
            note=row.get("note") or None, decided_at=row.get("decided_at") or None,
            probability=_number(row.get("probability")), weight=_number(row.get("weight")),
            run_decision=row.get("run_decision") or None, origin="import",
        )
        if existing is not None and existing["decision"] != "defer":
            summary.conflicts.append({"existing": existing, "imported": row})
            continue
        try:
            store.record(new)
            summary.added += 1
        except DecisionConflict as conflict:
            summary.conflicts.append({"existing": conflict.existing, "imported": row})
    return summary
