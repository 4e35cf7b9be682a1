"""``integrate check``: validate mapping files and sources without running the match.

Exit codes: 0 clean (notes only), 1 warnings only, 2 errors (a run would stop).
"""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser(
        "check",
        help="validate every mapping file and source; report errors, unread values and suspicious numbers",
        description="Exit code 0: clean; 1: warnings only; 2: errors (a run would stop).",
    )
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    cmd.add_argument("--meanings", action="store_true",
                     help="also print which columns of which sources feed each canonical field")
    cmd.add_argument("--no-linked", action="store_true",
                     help="do not compare linked records using the last run's crosswalk")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..mapping.checks import check_workspace

    report = check_workspace(args.workspace, use_last_run=not args.no_linked)
    for finding in report.findings:
        print(f"{finding.level}: {finding}")
    if args.meanings and not report.meanings.empty:
        print("\nmeanings (canonical field <- source column):")
        for field, group in report.meanings.groupby("field", sort=False):
            print(f"  {field} ({group['type'].iloc[0]}): {group['meaning'].iloc[0]}")
            for row in group.itertuples(index=False):
                if not row.source:
                    print("    (no source feeds it)")
                    continue
                how = f" [{row.how}]" if row.how else ""
                note = f" - {row.note}" if row.note else ""
                print(f"    <- {row.source}.{row.column}{how}{note}")
    counts = {level: len(report.of_level(level)) for level in ("error", "warning", "note")}
    records = sum(report.records.values())
    linked = f"; linked records compared using {report.linked_from}" if report.linked_from else ""
    print(f"checked {len(report.records)} sources, {records} records{linked}: "
          f"{counts['error']} errors, {counts['warning']} warnings, {counts['note']} notes")
    return report.exit_code()
