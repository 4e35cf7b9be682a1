"""``integrate evaluate``: precision, recall and F1 of a crosswalk against a true one."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    ev = sub.add_parser("evaluate", help="precision, recall and F1 of a crosswalk against a true crosswalk")
    ev.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    ev.add_argument("--truth", required=True, help="true crosswalk CSV (source, record_id, entity_id)")
    ev.add_argument("--crosswalk", help="crosswalk to judge (default: the last run's, e.g. out/crosswalk.csv)")
    ev.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..evaluate import evaluate, read_crosswalk_file, scores_by_source_kind
    from ..outputs.publish import current_output_folder

    crosswalk_path = args.crosswalk or str(current_output_folder(args.workspace) / "crosswalk.csv")
    crosswalk, truth = read_crosswalk_file(crosswalk_path), read_crosswalk_file(args.truth)
    result = evaluate(crosswalk, truth)
    for name, scores in (("pairwise", result.pairwise), ("B-cubed", result.bcubed)):
        print(f"{name:<9} precision {scores.precision:.4f}  recall {scores.recall:.4f}  F1 {scores.f1:.4f}")
    print(f"true pairs {result.true_pairs}, predicted pairs {result.predicted_pairs}")
    for name, scores in scores_by_source_kind(crosswalk, truth).items():
        print(f"pairs {name:<17} precision {scores.precision:.4f}  recall {scores.recall:.4f}  F1 {scores.f1:.4f}")
    return 0
