"""``integrate explain A B``: each field's values, grade and weight for two records, and the total."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("explain", help="show field by field why two records were or were not linked")
    cmd.add_argument("record_a", help="first record as SOURCE:RECORD_ID (e.g. webshop:W100234)")
    cmd.add_argument("record_b", help="second record as SOURCE:RECORD_ID")
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    import pandas as pd
    from rich.console import Console
    from rich.table import Table

    from ..explain import explain_pair
    from ..matching import match_records
    from ..pipeline import read_and_map
    from ..workspace import load_workspace

    ws = load_workspace(args.workspace)
    records, _ = read_and_map(ws)
    regions = {e.mapping.source: e.mapping.region for e in ws.sources}
    match = match_records(records.reset_index(drop=True), ws.canonical, regions=regions)
    result = explain_pair(records.reset_index(drop=True), match, ws.canonical, args.record_a, args.record_b)
    table = Table(title=f"{result.record_a}  vs  {result.record_b}")
    for column, justify in (("field", "left"), ("value_a", "left"), ("value_b", "left"), ("grade", "left"),
                            ("weight", "right")):
        table.add_column(column.replace("_", " "), justify=justify)
    for row in result.table.itertuples(index=False):
        weight = "" if pd.isna(row.weight) else f"{row.weight:+.2f}"  # empty: weighed jointly below
        table.add_row(*(("" if pd.isna(v) else str(v)) for v in row[:4]), weight)
    console = Console()
    console.print(table)
    console.print(f"total weight {result.total_weight:+.2f} bits (fields scored jointly by the model), "
                  f"prior {result.prior_weight:+.2f} bits -> match probability {result.probability:.4f}: "
                  f"{result.decision}" + ("" if result.candidate else " (blocking did not propose this pair)"))
    return 0
