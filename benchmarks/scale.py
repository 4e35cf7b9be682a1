#!/usr/bin/env python3
"""How the cost of a run grows with the number of records.

    python benchmarks/scale.py --people 10000,100000,300000,1000000
    python benchmarks/scale.py --api --rows 72000,240000,720000

Workspace mode: for each size, ``demo_sources/generate.py --people N`` makes a workspace (kept
in ``--work`` for the next time), then ``integrate run`` runs on it in a fresh process. Printed
per size: records, candidate pairs, wall time per stage, total, peak memory (the child's peak
RSS at the end of each stage, from getrusage), pairwise and B-cubed F1 against the generated
truth. Then the growth exponent b of time = a * records**b (least squares on log-log) for time
and for memory, against the targets.

API mode (``--api``): ``integrate.deduplicate`` on one export of seven fields (two names, birth
date, e-mail, phone, street, postcode) of the given number of rows, taken from a generated
workspace, default settings; timed around the call alone.

Each size runs in its own process under an address-space cap (``--memory-cap``, default 14 GB)
so a size that would swap is stopped instead. Run one size at a time on a shared machine.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
RECORDS_PER_PERSON = 1.833  # measured on generated workspaces (18,478 records for 10,000 people)
SEVEN_FIELDS = ("given_name", "family_name", "birth_date", "email", "phone", "street", "postcode")

# Targets (issue 12): 1M people <= 3 min and <= 8 GB; growth exponent <= 1.15; 720k-row
# deduplicate <= 90 s and <= 6 GB.
TARGET_EXPONENT = 1.15
TARGET_RUN = (1_000_000, 180.0, 8.0)
TARGET_API = (720_000, 90.0, 6.0)


def peak_gb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024 / 1024  # KiB on Linux


def workspace_for(work: Path, people: int, seed: int | None) -> Path:
    folder = work / (f"people-{people}" + ("" if seed is None else f"-seed{seed}"))
    if not (folder / "mappings" / "canonical.yaml").exists() or not (folder / "demo_sources" / "rates.csv").exists():
        command = [sys.executable, str(ROOT / "demo_sources" / "generate.py"), "--people", str(people),
                   "--out", str(folder)]
        if seed is not None:
            command += ["--seed", str(seed)]
        started = time.perf_counter()
        subprocess.run(command, check=True, stdout=subprocess.DEVNULL)
        print(f"  generated {people:,} people in {time.perf_counter() - started:.0f} s -> {folder}", flush=True)
    return folder


# --------------------------------------------------------------------------
# Children: one measured run each
# --------------------------------------------------------------------------

def child_run(folder: Path) -> dict:
    import integrate

    stages: list[tuple[str, float, float, float]] = []  # (stage, seconds, CPU seconds, peak GB at its end)
    clock = {"stage": "", "start": time.perf_counter(), "cpu": time.process_time()}

    def progress(stage: str) -> None:
        now, cpu = time.perf_counter(), time.process_time()
        if clock["stage"]:
            stages.append((clock["stage"], now - clock["start"], cpu - clock["cpu"], peak_gb()))
        clock.update(stage=stage, start=now, cpu=cpu)

    started, cpu_started = time.perf_counter(), time.process_time()
    result = integrate.run(folder, progress=progress, output_dir=folder / "out")
    total = time.perf_counter() - started
    quality = result.quality.evaluation if result.quality else None
    return {"records": len(result.records), "pairs": int(result.blocking.candidate_pairs),
            "stages": stages, "total": total, "cpu": time.process_time() - cpu_started, "peak_gb": peak_gb(),
            "pairwise_f1": quality.pairwise.f1 if quality else None,
            "bcubed_f1": quality.bcubed.f1 if quality else None}


def seven_field_export(folder: Path, rows: int):
    """One export of ``rows`` records with seven fields, and its truth, from a workspace."""
    import pandas as pd

    from integrate.pipeline import read_and_map
    from integrate.workspace import load_workspace

    records, _ = read_and_map(load_workspace(folder))
    records = records.iloc[:rows]
    frame = pd.DataFrame({name: records[name].astype("string") for name in SEVEN_FIELDS})
    frame.index = (records["_source"].astype(str) + ":" + records["_record_id"].astype(str)).to_numpy()
    truth = pd.read_csv(folder / "demo_sources" / "truth" / "crosswalk.csv", dtype=str)
    truth = pd.DataFrame({"source": "input", "record_id": truth["source"] + ":" + truth["record_id"],
                          "entity_id": truth["entity_id"]})
    return frame, truth


def child_api(folder: Path, rows: int) -> dict:
    import integrate

    frame, truth = seven_field_export(folder, rows)
    fields = {"given_name": "person_name", "family_name": "person_name", "birth_date": "date",
              "email": "email", "phone": "phone", "street": "text", "postcode": "postcode"}
    before = peak_gb()
    started, cpu_started = time.perf_counter(), time.process_time()
    result = integrate.deduplicate(frame, fields)
    total, cpu = time.perf_counter() - started, time.process_time() - cpu_started
    quality = integrate.evaluate(result.crosswalk, truth)
    return {"records": len(frame), "pairs": len(result.pairs), "stages": [("deduplicate", total, cpu, peak_gb())],
            "total": total, "cpu": cpu, "peak_gb": peak_gb(), "input_gb": before,
            "pairwise_f1": quality.pairwise.f1, "bcubed_f1": quality.bcubed.f1}


# --------------------------------------------------------------------------
# Parent: sizes one after another, then the fit
# --------------------------------------------------------------------------

def run_child(args: list[str], memory_cap: int) -> dict | None:
    def cap() -> None:
        resource.setrlimit(resource.RLIMIT_AS, (memory_cap, memory_cap))

    completed = subprocess.run([sys.executable, __file__, *args], capture_output=True, text=True,
                               preexec_fn=cap, env={**os.environ, "PYTHONWARNINGS": "ignore"})
    for line in completed.stdout.splitlines()[::-1]:
        if line.startswith("RESULT "):
            return json.loads(line[7:])
    tail = (completed.stderr or completed.stdout).strip().splitlines()[-5:]
    print(f"  failed (exit {completed.returncode}): " + " | ".join(tail), flush=True)
    return None


def exponent(xs: list[float], ys: list[float]) -> float | None:
    """Slope of log(y) against log(x), least squares."""
    if len(xs) < 2:
        return None
    lx = [math.log(x) for x in xs]
    ly = [math.log(max(y, 1e-9)) for y in ys]
    mx, my = sum(lx) / len(lx), sum(ly) / len(ly)
    den = sum((a - mx) ** 2 for a in lx)
    return sum((a - mx) * (b - my) for a, b in zip(lx, ly, strict=True)) / den if den else None


def show(size_label: str, result: dict) -> None:
    stages = "  ".join(f"{name} {seconds:.1f}s/{cpu:.1f}s/{gb:.2f}GB" for name, seconds, cpu, gb in result["stages"])
    f1 = result["pairwise_f1"]
    b3 = result["bcubed_f1"]
    print(f"{size_label}: records {result['records']:,}  candidate pairs {result['pairs']:,}  "
          f"total {result['total']:.1f} s (CPU {result['cpu']:.1f} s)  peak {result['peak_gb']:.2f} GB  "
          f"pairwise F1 {f1 if f1 is None else round(f1, 4)}  B-cubed F1 {b3 if b3 is None else round(b3, 4)}")
    print(f"    per stage (wall / CPU / peak so far): {stages}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--people", default="10000,100000,300000,1000000",
                        help="comma-separated numbers of invented people (workspace mode)")
    parser.add_argument("--api", action="store_true", help="time integrate.deduplicate on one export instead")
    parser.add_argument("--rows", default="72000,240000,720000", help="rows of the export (with --api)")
    parser.add_argument("--seed", type=int, default=None, help="generator seed (default: the generator's)")
    parser.add_argument("--work", type=Path, default=Path(os.environ.get("TMPDIR", "/tmp")) / "integrate-scale",
                        help="folder for the generated workspaces (kept for the next run)")
    parser.add_argument("--memory-cap", type=float, default=14e9, help="address-space cap per size, bytes")
    parser.add_argument("--child", nargs="+", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        if args.child[0] == "run":
            out = child_run(Path(args.child[1]))
        else:
            out = child_api(Path(args.child[1]), int(args.child[2]))
        print("RESULT " + json.dumps(out))
        return

    args.work.mkdir(parents=True, exist_ok=True)
    sizes = [int(s) for s in (args.rows if args.api else args.people).split(",") if s.strip()]
    done: list[tuple[int, dict]] = []
    for size in sizes:
        if args.api:
            people = math.ceil(size / RECORDS_PER_PERSON * 1.02)
            folder = workspace_for(args.work, people, args.seed)
            result = run_child(["--child", "api", str(folder), str(size)], int(args.memory_cap))
            label = f"deduplicate {size:,} rows"
        else:
            folder = workspace_for(args.work, size, args.seed)
            result = run_child(["--child", "run", str(folder)], int(args.memory_cap))
            label = f"{size:,} people"
        if result is None:
            print(f"{label}: did not finish under the {args.memory_cap / 1e9:.0f} GB cap", flush=True)
            continue
        show(label, result)
        done.append((size, result))

    if len(done) >= 2:
        records = [r["records"] for _, r in done]
        time_exp = exponent(records, [r["total"] for _, r in done])
        cpu_exp = exponent(records, [r["cpu"] for _, r in done])
        memory_exp = exponent(records, [r["peak_gb"] for _, r in done])
        print(f"growth exponent (log-log fit over {len(done)} sizes): wall time {time_exp:.2f}, CPU time "
              f"{cpu_exp:.2f}, peak memory {memory_exp:.2f}  (target <= {TARGET_EXPONENT})")
        f1s = [r["pairwise_f1"] for _, r in done if r["pairwise_f1"] is not None]
        if len(f1s) >= 2:
            print(f"pairwise F1 from smallest to largest size: {f1s[0]:.4f} -> {f1s[-1]:.4f}")
    target_size, target_s, target_gb = TARGET_API if args.api else TARGET_RUN
    for size, result in done:
        if size == target_size:
            verdict = "met" if result["total"] <= target_s and result["peak_gb"] <= target_gb else "NOT met"
            print(f"target at {size:,}: <= {target_s:.0f} s and <= {target_gb:.0f} GB -> "
                  f"{result['total']:.0f} s, {result['peak_gb']:.1f} GB: {verdict}")


if __name__ == "__main__":
    main()
