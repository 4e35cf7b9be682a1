"""``integrate changes --since RUN``: what changed between two recorded runs (printing part)."""

from __future__ import annotations

from typing import Any

from ..errors import InputError

SINCE_ORDER = ("merged", "split", "split_part", "changed", "grew", "shrank", "retired", "created")


def find_run(runs: list[Any], run_id: int, option: str) -> Any:
    run = next((r for r in runs if r.run_id == run_id), None)
    if run is None:
        raise InputError(f"run {run_id} ({option}) is not in the state store", value=run_id, reason="unknown_run",
                         hint=f"runs are numbered {runs[0].run_id} to {runs[-1].run_id}")
    return run


def print_since(store: Any, runs: list[Any], since: int, run: Any, limit: int) -> int:
    from rich.console import Console
    from rich.table import Table

    from ..history import changes_and_summary

    console = Console()
    old = find_run(runs, since, "--since")
    if old.run_id >= run.run_id:
        raise InputError(f"--since {since} is not before run {run.run_id}", value=since, reason="bad_run_order",
                         hint="give an earlier run with --since, or a later one with --run")
    table, summary = changes_and_summary(store.crosswalk(old.run_id), store.crosswalk(run.run_id),
                                         old_run=old.run_id)
    console.print(f"Run {run.run_id} (started {run.started_at}) against run {old.run_id} "
                  f"(started {old.started_at}): {old.records} -> {run.records} records, "
                  f"{old.entities} -> {run.entities} entities.")
    counts = table["change"].value_counts()
    totals = Table(title=f"Changes since run {old.run_id}")
    totals.add_column("what")
    totals.add_column("count", justify="right")
    for change in SINCE_ORDER:
        totals.add_row(f"entities {change.replace('_', ' ')}", str(int(counts.get(change, 0))))
    totals.add_row("entities unchanged", str(summary.unchanged))
    for label, value in (("records added", summary.records_added), ("records removed", summary.records_removed),
                         ("records moved", summary.records_moved)):
        totals.add_row(label, str(value))
    console.print(totals)
    if limit > 0 and len(table):
        rank = {c: k for k, c in enumerate(SINCE_ORDER)}
        table = table.assign(_rank=table["change"].map(rank)).sort_values(["_rank", "entity_id"], kind="mergesort")
        listed = Table(title="Entities and the records that changed them")
        for column in ("entity_id", "change", "related_ids", "records", "records_gained", "records_lost"):
            listed.add_column(column.replace("_", " "))
        for row in table.head(limit).itertuples(index=False):  # at most --limit rows
            listed.add_row(row.entity_id, row.change, row.related_ids or "", str(row.records),
                           row.records_gained, row.records_lost)
        console.print(listed)
        if len(table) > limit:
            console.print(f"... and {len(table) - limit} more (raise --limit to list them).")
    return 0
