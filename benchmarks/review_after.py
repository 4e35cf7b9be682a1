"""The demo's figures after review: a reviewer who always answers right, simulated from the truth.

Run: python benchmarks/review_after.py [--workspace DIR] [--keep FILE]

In a scratch copy of the workspace: ``integrate run``, then every pair of the run's review queue
(the possible links and the weakest links of suspicious clusters, as ``integrate review`` would
show them) is decided *same* or *different* from the known-true crosswalk and written to a
decisions file in the format of ``integrate review --export``; ``integrate review --import`` adds
them, ``integrate run`` runs again, and ``integrate evaluate`` prints the figures before and after.
``--keep FILE`` also copies the simulated decisions file there.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import pandas as pd

from integrate.review.queue import load_review_data

ROOT = Path(__file__).resolve().parents[1]


def cli(ws: Path, *args: str) -> str:
    done = subprocess.run([sys.executable, "-m", "integrate", *args], cwd=ws, capture_output=True, text=True,
                          check=False)
    if done.returncode not in (0, 1):
        raise SystemExit(f"integrate {' '.join(args)} failed:\n{done.stderr}")
    return done.stdout


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workspace", type=Path, default=ROOT)
    parser.add_argument("--keep", type=Path, help="copy the simulated decisions file here")
    args = parser.parse_args()
    truth_file = "demo_sources/truth/crosswalk.csv"
    with tempfile.TemporaryDirectory(prefix="review-after-") as tmp:
        ws = Path(tmp) / "ws"
        ws.mkdir()
        for name in ("mappings", "demo_sources", "schemas"):
            if (args.workspace / name).exists():
                shutil.copytree(args.workspace / name, ws / name)
        cli(ws, "run")
        print("before review:\n" + cli(ws, "evaluate", "--truth", truth_file))
        queue = load_review_data(ws).queue
        truth = pd.read_csv(ws / truth_file, dtype=str)
        entity = dict(zip(zip(truth["source"], truth["record_id"]), truth["entity_id"]))
        same = [entity.get((a, ra)) == entity.get((b, rb)) for a, ra, b, rb in
                queue[["source_a", "record_id_a", "source_b", "record_id_b"]].itertuples(index=False)]
        decisions = queue[["source_a", "record_id_a", "source_b", "record_id_b"]].assign(
            decision=["same" if s else "different" for s in same], reviewer="simulated", note="from the truth")
        file = ws / "simulated-decisions.csv"
        decisions.to_csv(file, index=False)
        print(f"review queue: {len(queue):,} pairs; simulated decisions: {sum(same):,} same, "
              f"{len(same) - sum(same):,} different")
        if args.keep:
            shutil.copyfile(file, args.keep)
        cli(ws, "review", "--import", str(file))
        cli(ws, "run")
        print("after review:\n" + cli(ws, "evaluate", "--truth", truth_file))


if __name__ == "__main__":
    main()
