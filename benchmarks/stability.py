"""How far the result moves when unrelated records are added, removed or reordered.

Run: python benchmarks/stability.py [--workspace DIR] [--added 1,10,100] [--removed 5]

Copies the workspace's mapping files and sources into a scratch folder, runs the matching once
as it is, then once per change to one source file (the web-shop CSV of the demo, or the first
CSV source): N invented records appended that are like nobody (made-up names of random letters,
their own e-mail, no phone), a handful of records removed that stood alone in the first run,
and the rows of the file reversed. For each it prints how many of the original records moved
(their entity holds a different set of original records than before), how many entities were
split or merged, the EM iterations and the estimated share of matches (λ).

Nothing is written into the workspace; the runs compute only (``write=False``).
"""

from __future__ import annotations

import argparse
import shutil
import string
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from integrate.pipeline import run_pipeline
from integrate.workspace import load_workspace

ROOT = Path(__file__).resolve().parents[1]


def invented_rows(columns: list[str], count: int, seed: int = 7) -> pd.DataFrame:
    """Rows that resemble no one: names of random letters, a private e-mail, no phone."""
    rng = np.random.default_rng(seed)
    letters = np.array(list(string.ascii_lowercase))

    def word(n: int) -> str:
        return "".join(rng.choice(letters, n)).capitalize()

    rows = []
    for k in range(count):
        given, family = word(7), word(9)
        row = {c: "" for c in columns}
        row.update({columns[0]: f"X{900000 + k}"})
        for c in columns:
            low = c.lower()
            if "first" in low or "given" in low:
                row[c] = given
            elif "last" in low or "family" in low or "surname" in low:
                row[c] = family
            elif "mail" in low:
                row[c] = f"{given.lower()}.{family.lower()}@nowhere.example.org"
        rows.append(row)
    return pd.DataFrame(rows, columns=columns)


def partition(result) -> pd.Series:
    """Per record key, a frozen set of the record keys of its entity."""
    cw = result.crosswalk
    keys = cw["source"] + ":" + cw["record_id"].astype(str)
    groups = keys.groupby(cw["entity_id"].to_numpy()).agg(frozenset)
    return pd.Series(cw["entity_id"].map(groups).to_numpy(), index=keys.to_numpy())


def moved(before: pd.Series, after: pd.Series) -> dict[str, int]:
    """Records of ``before`` whose entity (restricted to records of both runs) changed."""
    common = before.index.intersection(after.index)
    keep = set(common)
    b = before[common].map(lambda s: frozenset(s & keep))
    a = after[common].map(lambda s: frozenset(s & keep))
    changed = b != a
    before_entities = set(b[changed])
    after_entities = set(a[changed])
    return {"moved": int(changed.sum()), "entities_before": len(before_entities),
            "entities_after": len(after_entities)}


def run(ws_dir: Path) -> tuple[object, float]:
    start = time.perf_counter()
    result = run_pipeline(load_workspace(ws_dir), write=False)
    return result, time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workspace", type=Path, default=ROOT)
    parser.add_argument("--added", default="1,10,100")
    parser.add_argument("--removed", type=int, default=5)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="stability-") as tmp:
        scratch = Path(tmp) / "ws"
        scratch.mkdir()
        for name in ("mappings", "demo_sources", "schemas"):
            if (args.workspace / name).exists():
                shutil.copytree(args.workspace / name, scratch / name)
        ws = load_workspace(scratch)
        csv_sources = [e for e in ws.sources if (p := e.data_path(scratch)) is not None and p.suffix == ".csv"]
        target = csv_sources[-1].data_path(scratch)
        original = pd.read_csv(target, dtype=str, keep_default_na=False)
        base, seconds = run(scratch)
        before = partition(base)
        print(f"base: {len(before):,} records, {before.nunique():,} entities, "
              f"EM {base.model.iterations} iterations, lambda {base.model.prior:.6f} ({seconds:.0f} s)")

        def trial(label: str, frame: pd.DataFrame) -> None:
            frame.to_csv(target, index=False)
            result, secs = run(scratch)
            figures = moved(before, partition(result))
            print(f"{label}: {figures['moved']:,} records moved ({figures['entities_before']} entities "
                  f"before, {figures['entities_after']} after), EM {result.model.iterations} iterations, "
                  f"lambda {result.model.prior:.6f} ({secs:.0f} s)")

        for n in (int(x) for x in args.added.split(",") if x):
            trial(f"{n} added", pd.concat([original, invented_rows(list(original.columns), n)], ignore_index=True))
        source = csv_sources[-1].mapping.source
        alone = [k.split(":", 1)[1] for k, s in before.items() if len(s) == 1 and k.startswith(source + ":")]
        drop = set(alone[:: max(len(alone) // max(args.removed, 1), 1)][: args.removed])
        trial(f"{len(drop)} removed", original[~original.iloc[:, 0].isin(drop)])
        trial("rows reversed", original.iloc[::-1])
        original.to_csv(target, index=False)


if __name__ == "__main__":
    main()
