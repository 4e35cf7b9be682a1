"""Next month's exports: an incremental run against a full run on the same inputs.

    python3 benchmarks/incremental.py --people 100000 --add 10000 [--change 0] [--remove 0] --work DIR

For each size: a generated workspace (``demo_sources/generate.py``) with ``--add`` records
withheld from the web shop and rental exports runs in full (the last month); the records are put
back (with ``--change`` records edited and ``--remove`` taken out), then the same workspace runs
``--incremental`` and, as the baseline, in full again, each in a fresh process (a cold call: import
and run). Prints wall time per stage, total, peak memory, pairwise F1 and the ratio full /
incremental; the incremental run's crosswalk is compared with the full one's.
Targets (issue 14): adding 10,000 records to 1,000,000 people in <= 30 s and <= 4 GB, >= 10x
faster than a full run. Not a timed test.
"""

from __future__ import annotations

import argparse
import json
import random
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

WEB, RENTALS = "demo_sources/webshop.csv", "demo_sources/rentals.jsonl"


def peak_gb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024 / 1024


def child(folder: Path, incremental: bool) -> dict:
    started = time.perf_counter()
    import integrate

    imported = time.perf_counter() - started
    stages: list[tuple[str, float]] = []
    clock = {"stage": "", "start": time.perf_counter()}

    def progress(stage: str) -> None:
        now = time.perf_counter()
        if clock["stage"]:
            stages.append((clock["stage"], now - clock["start"]))
        clock.update(stage=stage, start=now)

    result = integrate.run(folder, progress=progress, incremental=incremental)
    quality = result.quality.evaluation if result.quality else None
    summary = result.incremental
    return {"total": time.perf_counter() - started, "import": imported, "stages": stages, "peak_gb": peak_gb(),
            "records": len(result.records), "pairs": len(result.pairs),
            "pairwise_f1": quality.pairwise.f1 if quality else None, "run_dir": str(result.run_dir),
            "summary": summary.text() if summary else None}


def run_child(folder: Path, incremental: bool = False) -> dict:
    command = [sys.executable, __file__, "--child", str(folder)] + (["--incremental"] if incremental else [])
    out = subprocess.run(command, capture_output=True, text=True)
    if out.returncode:
        raise SystemExit(f"run failed ({' '.join(command)}):\n{out.stderr[-3000:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def withhold(folder: Path, add: int, change: int, remove: int, seed: int = 14) -> tuple[dict, dict]:
    """The last month's and this month's export lines (web shop CSV and rentals JSON lines)."""
    lines = {name: (folder / name).read_text(encoding="utf-8").splitlines(keepends=True) for name in (WEB, RENTALS)}
    rows = [(WEB, k) for k in range(1, len(lines[WEB]))] + [(RENTALS, k) for k in range(len(lines[RENTALS]))]
    random.Random(seed).shuffle(rows)
    added, changed = set(rows[:add]), set(rows[add:add + change])
    removed = set(rows[add + change:add + change + remove])

    def edit(name: str, line: str) -> str:
        if name == WEB:
            cells = line.rstrip("\n").split(";")
            cells[3] = "new." + cells[3] if cells[3] else "moved@example.net"
            return ";".join(cells) + "\n"
        row = json.loads(line)
        row["contact"]["phone"] = "07700 900" + row["rental_ref"][-3:]
        return json.dumps(row) + "\n"

    before = {n: [x for k, x in enumerate(ls) if (n, k) not in added] for n, ls in lines.items()}
    after = {n: [edit(n, x) if (n, k) in changed else x for k, x in enumerate(ls) if (n, k) not in removed]
             for n, ls in lines.items()}
    return before, after


def write(folder: Path, files: dict) -> None:
    for name, lines in files.items():
        (folder / name).write_text("".join(lines), encoding="utf-8")


def stage_text(stages: list) -> str:
    summed: dict[str, float] = {}
    for stage, seconds in stages:
        summed[stage] = summed.get(stage, 0.0) + seconds
    return ", ".join(f"{s} {t:.1f}" for s, t in summed.items() if t >= 0.05)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--people", default="10000", help="comma-separated sizes (people)")
    parser.add_argument("--add", type=int, default=10000, help="records added this month")
    parser.add_argument("--change", type=int, default=0, help="records changed this month")
    parser.add_argument("--remove", type=int, default=0, help="records removed this month")
    parser.add_argument("--work", default="/tmp/integrate-incremental", help="folder for the workspaces")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    parser.add_argument("--incremental", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(child(Path(args.child), args.incremental)))
        return 0
    import pandas as pd
    from scale import workspace_for

    work = Path(args.work)
    for people in [int(p) for p in args.people.split(",")]:
        source = workspace_for(work, people, None)
        folder = work / f"month-{people}"
        shutil.rmtree(folder, ignore_errors=True)
        shutil.copytree(source / "mappings", folder / "mappings")
        shutil.copytree(source / "demo_sources", folder / "demo_sources")
        before, after = withhold(folder, args.add, args.change, args.remove)
        write(folder, before)
        last = run_child(folder)
        write(folder, after)
        inc = run_child(folder, incremental=True)
        full = run_child(folder)
        same = pd.read_csv(Path(inc["run_dir"]) / "crosswalk.csv").equals(pd.read_csv(Path(full["run_dir"]) /
                                                                                    "crosswalk.csv"))
        print(f"{people:,} people: last month {last['records']:,} records, this month {inc['records']:,} "
              f"(+{args.add:,} added, {args.change:,} changed, {args.remove:,} removed), {inc['pairs']:,} pairs")
        print(f"  last month, full:  {last['total']:.1f} s, peak {last['peak_gb']:.2f} GB")
        print(f"  incremental:       {inc['total']:.1f} s (import {inc['import']:.1f}), peak {inc['peak_gb']:.2f} GB, "
              f"F1 {inc['pairwise_f1']:.4f}  [{stage_text(inc['stages'])}]")
        print(f"    {inc['summary']}")
        print(f"  full (baseline):   {full['total']:.1f} s, peak {full['peak_gb']:.2f} GB, F1 {full['pairwise_f1']:.4f}"
              f"  [{stage_text(full['stages'])}]")
        print(f"  full / incremental: {full['total'] / inc['total']:.2f}x time, "
              f"{full['peak_gb'] / inc['peak_gb']:.2f}x memory; crosswalks identical: {same} "
              f"(the full run re-estimates the model, the incremental run keeps last month's)", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
