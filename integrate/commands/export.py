"""``integrate export --format xlsx|sqlite|duckdb``: the last run's merged table for analysts."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..outputs.exports import FORMATS


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("export", help="the merged table as an Excel workbook or a SQLite / DuckDB table",
                         description="Excel: sheets merged, provenance and about (formulas neutralised). "
                                     "SQLite / DuckDB: tables merged, provenance and crosswalk.")
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    cmd.add_argument("--format", required=True, choices=FORMATS, dest="fmt", help="file format")
    cmd.add_argument("--out", help="output folder to read (default: the last run's, else the schema's 'output')")
    cmd.add_argument("--to", help="file to write (default: merged.FORMAT in the folder read)")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..outputs.exports import export_outputs
    from .show import output_folder

    path = export_outputs(output_folder(args.workspace, args.out), args.fmt, Path(args.to) if args.to else None)
    print(f"wrote {path}")
    print("It holds personal data: keep it where only people who need it can read it.")
    return 0
