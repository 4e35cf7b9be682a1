"""``integrate run``: the whole run on a workspace."""

from __future__ import annotations

import argparse
import sys

from ._progress import stage_progress


def register(sub: argparse._SubParsersAction) -> None:
    run = sub.add_parser("run", help="read every source, match, merge, and write outputs and a run report")
    run.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    run.add_argument("--out", help="output folder (default: the schema's 'output', usually out/)")
    run.add_argument("--engine", choices=("local", "dask"), default="local",
                     help="where blocking, comparison and scoring run: this process (default) or a Dask cluster")
    run.add_argument("--scheduler", metavar="ADDRESS",
                     help="with --engine dask: a running Dask scheduler, e.g. tcp://10.0.0.5:8786 "
                          "(default: a local cluster of two worker processes)")
    run.add_argument("--keep-runs", type=int, metavar="N",
                     help="run folders to keep in the output folder (default: INTEGRATE_KEEP_RUNS or 3)")
    run.add_argument("--incremental", action="store_true",
                     help="build on the last run: only new and changed records are standardised and compared, "
                          "and the last run's model scores the pairs (a full run when that is not possible)")
    run.add_argument("--refit", action="store_true",
                     help="with --incremental: estimate the model again instead of keeping the last run's")
    run.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..pipeline import STAGES, run_pipeline

    if args.out:
        check_output_dir(args.out)  # before hours of work, not after
    with stage_progress(STAGES) as progress:
        result = run_pipeline(args.workspace, progress=progress, output_dir=args.out,
                              keep_runs=args.keep_runs, engine=args.engine, scheduler=args.scheduler,
                              incremental=args.incremental, refit=args.refit)
    records = sum(result.source_counts.values())
    decisions = result.pairs["decision"].value_counts()
    print(f"{records} records from {len(result.source_counts)} sources -> {len(result.merged)} entities")
    for source, count in result.source_counts.items():
        print(f"  {source:<14} {count:>7} records")
    print(f"candidate pairs {len(result.pairs)}: " + ", ".join(f"{k} {v}" for k, v in decisions.items()))
    if result.incremental is not None:
        print(result.incremental.text())
    changes = result.changes
    if changes is not None and changes.previous_run is not None:
        print(f"since run {changes.previous_run}: {changes.unchanged} entities unchanged, {changes.created} created, "
              f"{changes.merged} merged, {changes.split} split, {changes.retired} retired; "
              f"records {changes.records_added} added, {changes.records_removed} removed, "
              f"{changes.records_moved} moved (integrate changes lists them)")
    if not result.failures.empty:
        print(f"{len(result.failures)} values could not be read and were left empty (see failures.csv)")
    for warning in result.warnings:
        print(f"warning: {warning}", file=sys.stderr)
    print(f"outputs: {result.output_dir} (run {result.run_id}: {result.run_dir})")
    print(f"report:  {result.report_path}")
    print("Review merges before acting on them; these files hold personal data.")
    return 0


def check_output_dir(folder: str) -> None:
    """Create the output folder now and make sure files can be written in it.

    Raises:
        InputError: ``bad_output_dir`` naming the folder and why it cannot be used.
    """
    import tempfile
    from pathlib import Path

    from ..errors import InputError

    path = Path(folder)
    try:
        path.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=path, prefix=".write-test-"):
            pass
    except OSError as exc:
        reason = "it is a file" if path.is_file() else (exc.strerror or str(exc))
        raise InputError(f"output folder cannot be created or written: {reason}", file=folder,
                         reason="bad_output_dir",
                         hint="give --out a folder you can write to (it is created if missing)") from exc
