"""``integrate blocking``: what the blocking rules do on a workspace, without scoring anything."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("blocking", help="pairs per blocking rule, largest blocks, reduction ratio, completeness")
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    cmd.add_argument("--truth", help="true crosswalk CSV (source, record_id, entity_id) for pairs completeness")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..block import block, default_rules
    from ..evaluate import evaluate, read_crosswalk_file
    from ..pipeline import read_and_map
    from ..standardise import standardise
    from ..workspace import load_workspace

    ws = load_workspace(args.workspace)
    records, _ = read_and_map(ws)
    records = records.reset_index(drop=True)
    regions = {e.mapping.source: e.mapping.region for e in ws.sources}
    prepared = standardise(records, ws.canonical, regions)
    rules = list(ws.canonical.blocking) or default_rules(ws.canonical)
    pairs, report = block(prepared, rules, max_block_size=ws.canonical.max_block_size,
                          order_columns=[n for n, f in ws.canonical.fields.items() if f.is_compared()])
    print(f"{len(records)} records, {report.candidate_pairs} candidate pairs of {report.all_pairs} "
          f"({report.candidate_pairs / max(len(records), 1):.1f} per record); "
          f"reduction ratio {report.reduction_ratio:.6f}")
    width = max(len(r) for r in report.rules)
    print(f"{'rule':<{width}}  {'pairs':>9}  {'only here':>9}  largest blocks")
    for rule in report.rules:
        largest = ", ".join(f"'{k}' ({n})" for k, n in report.largest_blocks[rule][:3])
        print(f"{rule:<{width}}  {report.pairs_per_rule[rule]:>9}  {report.unique_per_rule[rule]:>9}  {largest}")
    for rule, key, size in report.skipped_blocks:
        print(f"skipped: rule '{rule}', key '{key}' shared by {size} records (over max_block_size)")
    for rule, count, top, alone in report.split_blocks:
        shown = ", ".join(f"'{k}' ({n})" for k, n in top)
        print(f"split: rule '{rule}', {count} key values too large to compare all against all (largest: {shown}); "
              f"{alone} of their records have no candidate pair")
    if args.truth:
        truth = read_crosswalk_file(args.truth)
        crosswalk = records[["_source", "_record_id"]].rename(columns={"_source": "source", "_record_id": "record_id"})
        crosswalk = crosswalk.assign(entity_id=crosswalk["source"] + ":" + crosswalk["record_id"])
        result = evaluate(crosswalk, truth, pairs, records, report.all_pairs)
        print(f"pairs completeness {result.pairs_completeness:.4f} "
              f"(true pairs among candidates / all {result.true_pairs} true pairs)")
    return 0
