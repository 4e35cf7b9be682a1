"""``integrate changes``: what changed in a run against the run before it (from the state store)."""

from __future__ import annotations

import argparse

# the order in which entity-level changes are listed: the ones to check first
CHANGE_ORDER = ("merged", "split", "split_part", "changed", "retired", "created")


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("changes", help="what changed since the previous run: entities created, merged, split, ...")
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    cmd.add_argument("--run", type=int, help="run number (default: the last run)")
    cmd.add_argument("--limit", type=int, default=30, help="entities to list (default: 30; 0 lists none)")
    cmd.add_argument("--since", type=int, metavar="RUN",
                     help="compare with this earlier run instead of the run just before (any two runs)")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from rich.console import Console
    from rich.table import Table

    from ..errors import InputError
    from ..outputs.report import CHANGE_LABELS
    from ..state import StateStore, shown_url, state_url

    console = Console()
    store = StateStore.existing(args.workspace)
    runs = store.runs() if store is not None else []
    if not runs:
        console.print(f"No runs recorded yet in {shown_url(state_url(args.workspace))}; `integrate run` records one.")
        return 0
    run = runs[-1] if args.run is None else next((r for r in runs if r.run_id == args.run), None)
    if run is None:
        raise InputError(f"run {args.run} is not in the state store", value=args.run, reason="unknown_run",
                         hint=f"runs are numbered {runs[0].run_id} to {runs[-1].run_id}")
    if args.since is not None:  # any two runs: commands/changes_since.py
        from .changes_since import print_since

        return print_since(store, runs, args.since, run, args.limit)
    summary = run.summary
    console.print(f"Run {run.run_id} (started {run.started_at}): {run.records} records, {run.entities} entities.")
    if summary.get("previous_run") is None:
        console.print("The first recorded run: every entity is new.")
        return 0
    table = Table(title=f"Changes since run {summary['previous_run']}")
    table.add_column("what")
    table.add_column("count", justify="right")
    for key, label in CHANGE_LABELS.items():
        table.add_row(label, str(summary.get(key, 0)))
    console.print(table)
    changes = store.changes(run.run_id) if args.limit > 0 else None
    if changes is not None and len(changes):
        rank = {c: k for k, c in enumerate(CHANGE_ORDER)}
        changes = changes.assign(_rank=changes["change"].map(rank)).sort_values(
            ["_rank", "entity_id"], kind="mergesort")
        listed = Table(title="Entities (related IDs: the earlier entities, or for a split one its parts)")
        for column in ("entity_id", "change", "related_ids", "records", "records_added", "records_removed"):
            listed.add_column(column.replace("_", " "))
        for row in changes.head(args.limit).itertuples(index=False):  # at most --limit rows
            listed.add_row(row.entity_id, row.change, row.related_ids or "", str(row.records),
                           str(row.records_added), str(row.records_removed))
        console.print(listed)
        if len(changes) > args.limit:
            console.print(f"... and {len(changes) - args.limit} more (all in the output folder's changes.csv).")
    return 0
