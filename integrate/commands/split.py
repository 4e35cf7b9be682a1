"""``integrate split``: train / validation / test parts or k folds of a run's outputs, by entity."""

from __future__ import annotations

import argparse
from pathlib import Path


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser(
        "split", help="train/validation/test parts or k folds by entity (no person in two parts)",
        description="Assign every entity of the last run to a part, so all records of one person fall in the "
                    "same part; writes crosswalk_split and merged_split (CSV and Parquet) with the part as a column.")
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    how = cmd.add_mutually_exclusive_group(required=True)
    how.add_argument("--fractions", help="shares of the parts, adding up to 1 (e.g. 0.7,0.15,0.15)")
    how.add_argument("--folds", type=int, metavar="K", help="k equal folds instead")
    cmd.add_argument("--by-entity", action="store_true", default=True,
                     help="keep each entity's records together (always on: splitting records apart would leak "
                          "duplicates across parts)")
    cmd.add_argument("--seed", type=int, default=0, help="random seed (default 0): the same seed gives the same parts")
    cmd.add_argument("--unit", choices=("records", "rows"), default="records",
                     help="what the fractions count: source records (crosswalk rows, default) or merged rows")
    cmd.add_argument("--stratify", metavar="COLUMN",
                     help="keep the fractions within each value of a merged-table (or crosswalk) column")
    cmd.add_argument("--names", help="labels of the parts, comma-separated (default train,validation,test / fold_1..)")
    cmd.add_argument("--column", help="name of the added column (default 'split', or 'fold' with --folds)")
    cmd.add_argument("--out", help="output folder to read (default: the last run's, else the schema's 'output')")
    cmd.add_argument("--to", help="folder to write the split copies to (default: the folder read)")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..split import parse_fractions, split_outputs
    from .show import output_folder

    folder = output_folder(args.workspace, args.out)
    names = [n.strip() for n in args.names.split(",")] if args.names else None
    result = split_outputs(folder, fractions=parse_fractions(args.fractions) if args.fractions else None,
                           folds=args.folds, seed=args.seed, unit=args.unit, stratify=args.stratify, names=names,
                           column=args.column, dest=Path(args.to) if args.to else None)
    print(result.summary.to_string(index=False))
    for path in result.written:
        print(f"wrote {path}")
    return 0
