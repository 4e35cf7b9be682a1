"""The ``integrate`` command: parses arguments, calls the public API, prints. Nothing else."""

from __future__ import annotations

import argparse
import logging
import sys
from pathlib import Path

from . import __version__
from .errors import InputError, InputErrors, IntegrateError

EXIT_INPUT = 2  # the input (mapping files, sources, values) is wrong
EXIT_OTHER = 3  # any other error raised on purpose (settings, state)


def _progress_bar():  # noqa: ANN202 - rich types are optional detail here
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(TextColumn("{task.description:<12}"), BarColumn(), TimeElapsedColumn(),
                    transient=False, disable=not sys.stderr.isatty())


def cmd_run(args: argparse.Namespace) -> int:
    from .pipeline import STAGES, run_pipeline

    with _progress_bar() as bar:
        task = bar.add_task("starting", total=len(STAGES))

        def progress(stage: str) -> None:
            bar.update(task, description=stage, completed=min(STAGES.index(stage), len(STAGES))
                       if stage in STAGES else len(STAGES))

        result = run_pipeline(args.workspace, progress=progress, output_dir=args.out)
    records = sum(result.source_counts.values())
    decisions = result.pairs["decision"].value_counts()
    print(f"{records} records from {len(result.source_counts)} sources -> {len(result.merged)} entities")
    for source, count in result.source_counts.items():
        print(f"  {source:<14} {count:>7} records")
    print(f"candidate pairs {len(result.pairs)}: " + ", ".join(f"{k} {v}" for k, v in decisions.items()))
    if not result.failures.empty:
        print(f"{len(result.failures)} values could not be read and were left empty (see failures.csv)")
    for warning in result.warnings:
        print(f"warning: {warning}", file=sys.stderr)
    print(f"outputs: {result.output_dir}")
    print(f"report:  {result.report_path}")
    print("Review merges before acting on them; these files hold personal data.")
    return 0


def cmd_evaluate(args: argparse.Namespace) -> int:
    import pandas as pd

    from .evaluate import evaluate

    def read(path: str) -> pd.DataFrame:
        if not Path(path).exists():
            raise InputError("file not found", file=path, reason="missing_file")
        frame = pd.read_csv(path, dtype=str)
        missing = {"source", "record_id", "entity_id"} - set(frame.columns)
        if missing:
            raise InputError(f"missing columns {sorted(missing)}", file=path, line=1, reason="missing_column",
                             hint="a crosswalk has columns source, record_id, entity_id")
        return frame

    crosswalk_path = args.crosswalk or str(Path(args.workspace) / "out" / "crosswalk.csv")
    result = evaluate(read(crosswalk_path), read(args.truth))
    for name, scores in (("pairwise", result.pairwise), ("B-cubed", result.bcubed)):
        print(f"{name:<9} precision {scores.precision:.4f}  recall {scores.recall:.4f}  F1 {scores.f1:.4f}")
    print(f"true pairs {result.true_pairs}, predicted pairs {result.predicted_pairs}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="integrate",
        description="Merge several department exports about the same people into one deduplicated table.",
    )
    parser.add_argument("--version", action="version", version=f"integrate {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="show debugging detail")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    run = sub.add_parser("run", help="read every source, match, merge, and write outputs and a run report")
    run.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    run.add_argument("--out", help="output folder (default: the schema's 'output', usually out/)")
    run.set_defaults(func=cmd_run)

    ev = sub.add_parser("evaluate", help="precision, recall and F1 of a crosswalk against a true crosswalk")
    ev.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    ev.add_argument("--truth", required=True, help="true crosswalk CSV (source, record_id, entity_id)")
    ev.add_argument("--crosswalk", help="crosswalk to judge (default: WORKSPACE/out/crosswalk.csv)")
    ev.set_defaults(func=cmd_evaluate)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.DEBUG if args.verbose else logging.WARNING,
                        format="%(levelname)s: %(message)s")
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        return int(args.func(args))
    except InputErrors as many:
        print(f"error: {many}", file=sys.stderr)
        return EXIT_INPUT
    except InputError as one:
        print(f"error: {one}", file=sys.stderr)
        return EXIT_INPUT
    except IntegrateError as other:
        print(f"error: {other}", file=sys.stderr)
        return EXIT_OTHER
    except KeyboardInterrupt:
        print("interrupted; previous outputs are unchanged", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
