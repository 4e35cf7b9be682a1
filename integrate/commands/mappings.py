"""``integrate mappings history [FILE]`` and ``integrate mappings diff RUN_A RUN_B``: mapping files over time."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("mappings", help="the versions of the mapping files each run used, and what changed")
    cmd.set_defaults(func=lambda _args: cmd.print_help() or 0)
    what = cmd.add_subparsers(dest="mappings_command", metavar="WHAT")
    history = what.add_parser("history", help="list every version of the mapping files with run numbers and dates")
    history.add_argument("file", nargs="?", metavar="FILE", help="one mapping file (path, file name or source name)")
    history.add_argument("--workspace", default=".", help="workspace folder (default: current folder)")
    history.set_defaults(func=history_main)
    diff = what.add_parser("diff", help="what changed in the mapping files between two runs, and its effect")
    diff.add_argument("run_a", metavar="RUN_A", type=int)
    diff.add_argument("run_b", metavar="RUN_B", type=int)
    diff.add_argument("--workspace", default=".", help="workspace folder (default: current folder)")
    diff.set_defaults(func=diff_main)


def history_main(args: argparse.Namespace) -> int:
    from ..mapping_changes import history_rows

    rows = history_rows(args.workspace, args.file)
    if rows.empty:
        print("no runs with mapping files recorded" + (f" for '{args.file}'" if args.file else ""))
        return 0
    for path, group in rows.groupby("path", sort=True):
        print(path)
        for r in group.itertuples(index=False):
            runs = ", ".join(str(n) for n in r.runs)
            when = r.first if r.first == r.last else f"{r.first} .. {r.last}"
            stored = "" if r.text_stored else "  (text not stored)"
            print(f"  version {r.version}  {r.sha256[:12]}  run{'s' if len(r.runs) > 1 else ''} {runs}  {when}{stored}")
    return 0


def diff_main(args: argparse.Namespace) -> int:
    from ..mapping_changes import compare_runs

    comparison = compare_runs(args.workspace, args.run_a, args.run_b)
    if not comparison.files:
        print(f"mapping files are the same in runs {args.run_a} and {args.run_b}")
    for change in comparison.files:
        if change.diff is None:
            print(f"{change.path}: {change.status} (text of one version not stored; "
                  f"sha256 {str(change.old_sha256)[:12]} -> {str(change.new_sha256)[:12]})")
        else:
            print(change.diff, end="" if change.diff.endswith("\n") else "\n")
    e = comparison.effect
    if e is not None:
        print(f"run {args.run_a} -> run {args.run_b}: {e.entities_changed} entities changed; "
              f"{e.records_read_differently} of {e.records_compared} records read differently, "
              f"{e.records_added} added, {e.records_removed} removed")
    return 0
