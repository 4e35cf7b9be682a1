"""Kill ``integrate run`` at many points and check that every kill leaves one complete, recorded set.

Run: python benchmarks/kill_harness.py [--rows N] [--demo-points K] [--no-strace] [--points NAME ...]

Each case appends one new record to a source, starts ``integrate run`` as a subprocess and kills
it with SIGKILL at one point: a named point of the pipeline (``INTEGRATE_TEST_KILL_AT``, see
``integrate/killpoints.py``: each stage, each output file written and renamed, the report,
manifest and run-folder rename, inside and after the state-store transaction, each pointer
switch), or the N-th rename system call (``strace -e inject=...:signal=SIGKILL``, when strace is
installed). After the kill it checks the output folder:

- ``out/current`` names one run folder whose files all match its manifest (one run number);
- that run is the state store's last run (recorded), and it is the previous or the new one;
- every entity of merged is in the crosswalk and the reverse, clusters and provenance name only
  those entities, the crosswalk is the one the state store holds for that run, and it equals
  the crosswalk an uninterrupted run on the same inputs gave (the same entity IDs);
- the stable links (``out/merged.csv`` ...) and ``reports/latest.html`` lead into that folder;
- the state database passes ``PRAGMA integrity_check``.

Then it runs again without a kill and checks the same, plus: no temporary files, no unfinished
or unrecorded run folders left, entity IDs equal to the uninterrupted run's.

The cases run on a small copy of the demo (the first ``--rows`` records of each source), and
``--demo-points`` of them also on the full demo. Prints one line per case and a summary table.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

REPO = Path(__file__).resolve().parent.parent
KILL_ENV = "INTEGRATE_TEST_KILL_AT"
STAGES = ("read", "map", "standardise", "block", "compare", "score", "cluster", "resolve", "write")
TABLE_FILES = 13  # output files written per run (csv + parquet), see pipeline._publish
PUBLISH_POINTS = ("publish:report", "publish:manifest", "publish:folder", "state:run", "state:crosswalk",
                  "state:commit", "pointer:current", "pointer:report", "pointer:latest", "prune")
RENAME_CALLS = "rename,renameat,renameat2"


def named_points() -> list[str]:
    """Every named kill point of a run: each stage, each file written and renamed, each publish step."""
    return ([f"stage:{s}" for s in STAGES] + [f"write:file@{n}" for n in range(1, TABLE_FILES + 1)]
            + [f"write:rename@{n}" for n in range(1, TABLE_FILES + 1)] + list(PUBLISH_POINTS))


def strace_available() -> bool:
    return shutil.which("strace") is not None


# --- workspaces -----------------------------------------------------------------------------

def demo_workspace(dest: Path) -> Path:
    shutil.copytree(REPO / "mappings", dest / "mappings")
    shutil.copytree(REPO / "demo_sources", dest / "demo_sources",
                    ignore=shutil.ignore_patterns("__pycache__", "generate.py"))
    return dest


def small_workspace(dest: Path, rows: int = 120) -> Path:
    """The demo workspace cut to its first ``rows`` records per source (no truth file)."""
    from openpyxl import load_workbook

    demo_workspace(dest)
    src = dest / "demo_sources"
    lines = (src / "webshop.csv").read_text(encoding="utf-8").splitlines(keepends=True)
    (src / "webshop.csv").write_text("".join(lines[: rows + 1]), encoding="utf-8")
    lines = (src / "rentals.jsonl").read_text(encoding="utf-8").splitlines(keepends=True)
    (src / "rentals.jsonl").write_text("".join(lines[:rows]), encoding="utf-8")
    book = load_workbook(src / "membership.xlsx")
    for sheet in book.worksheets:
        if sheet.max_row > rows + 1:
            sheet.delete_rows(rows + 2, sheet.max_row - rows - 1)
    book.save(src / "membership.xlsx")
    with sqlite3.connect(src / "events.sqlite") as db:
        db.execute("DELETE FROM signups WHERE signup_id NOT IN "
                   "(SELECT signup_id FROM signups ORDER BY signup_id LIMIT ?)", (rows,))
    canonical = dest / "mappings" / "canonical.yaml"
    text = canonical.read_text(encoding="utf-8")
    canonical.write_text("\n".join(line for line in text.splitlines() if not line.startswith("truth:")) + "\n",
                         encoding="utf-8")
    return dest


def add_record(root: Path, k: int) -> None:
    """Append one new person to the web shop export (a new entity in the next run)."""
    path = root / "demo_sources" / "webshop.csv"
    with path.open("a", encoding="utf-8") as handle:
        handle.write(f"W9{k:05d};Kelda{k};Quillfeather{k};kelda{k}.q@mail.example.org;;;10,00;2025-01-01;TK1 2XH;N\n")


# --- running --------------------------------------------------------------------------------

@dataclass
class Outcome:
    killed: bool
    returncode: int
    seconds: float
    stderr: str


def preload() -> None:
    """Import what a run imports, so that forked runs start at once (``run(..., fork=True)``)."""
    import integrate.cli
    import integrate.commands.run
    import integrate.outputs.publish
    import integrate.outputs.report
    import integrate.pipeline
    import integrate.review.apply  # noqa: F401


def _run_forked(root: Path, kill_at: str | None) -> Outcome:
    """``integrate run`` in a child forked from this (pre-loaded) process: same code, no start-up."""
    log = tempfile.TemporaryFile()
    start = time.perf_counter()
    pid = os.fork()
    if pid == 0:  # the child: never returns into the caller's code
        code = 70
        try:
            os.dup2(log.fileno(), 1)
            os.dup2(log.fileno(), 2)
            os.chdir(root)
            os.environ.pop("INTEGRATE_STATE_URL", None)
            os.environ.pop(KILL_ENV, None)
            if kill_at:
                os.environ[KILL_ENV] = kill_at
            from integrate.cli import main as cli_main

            code = cli_main(["run", str(root)])
            sys.stdout.flush()
            sys.stderr.flush()
        finally:
            os._exit(code)
    _, status = os.waitpid(pid, 0)
    seconds = time.perf_counter() - start
    log.seek(0)
    text = log.read().decode("utf-8", "replace")
    log.close()
    if os.WIFSIGNALED(status):
        signum = os.WTERMSIG(status)
        return Outcome(signum == signal.SIGKILL, -signum, seconds, text)
    return Outcome(False, os.WEXITSTATUS(status), seconds, text)


def run(root: Path, *, kill_at: str | None = None, strace_when: int | None = None, timeout: float = 900,
        fork: bool = False) -> Outcome:
    """One ``integrate run`` of ``root``: a fresh interpreter (the real CLI), or forked with ``fork``."""
    if fork and strace_when is None:
        return _run_forked(root, kill_at)
    env = {k: v for k, v in os.environ.items() if k not in (KILL_ENV, "INTEGRATE_STATE_URL")}
    if kill_at:
        env[KILL_ENV] = kill_at
    command = [sys.executable, "-m", "integrate", "run", str(root)]
    if strace_when is not None:
        command = ["strace", "-f", "-o", "/dev/null", "-e", f"trace={RENAME_CALLS}",
                   "-e", f"inject={RENAME_CALLS}:signal=SIGKILL:when={strace_when}", *command]
    start = time.perf_counter()
    done = subprocess.run(command, env=env, capture_output=True, text=True, timeout=timeout, cwd=root)
    killed = done.returncode in (-signal.SIGKILL, 128 + signal.SIGKILL)
    return Outcome(killed, done.returncode, time.perf_counter() - start, done.stderr)


# --- checking -------------------------------------------------------------------------------

class Inconsistent(AssertionError):
    """The output folder is not one complete, recorded set."""


def _state(root: Path) -> tuple[dict[int, str], str]:
    with sqlite3.connect(root / ".integrate" / "state.sqlite") as db:
        integrity = db.execute("PRAGMA integrity_check").fetchone()[0]
        runs = {int(r[0]): r[1] for r in db.execute("SELECT run_id, output_dir FROM run")}
    return runs, integrity


def _state_crosswalk(root: Path, run_id: int) -> pd.DataFrame:
    with sqlite3.connect(root / ".integrate" / "state.sqlite") as db:
        return pd.read_sql_query("SELECT source, record_id, entity_id FROM run_crosswalk WHERE run_id = ?",
                                 db, params=(run_id,))


def _keyed(frame: pd.DataFrame) -> pd.DataFrame:
    return (frame[["source", "record_id", "entity_id"]].astype(str)
            .sort_values(["source", "record_id"], kind="mergesort").reset_index(drop=True))


def _complete(root: Path, folder: Path, run_id: int) -> pd.DataFrame:
    """Check one run folder is the complete set of ``run_id``; returns its crosswalk."""
    import hashlib

    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    if manifest["run_id"] != run_id:
        raise Inconsistent(f"{folder.name} holds run {manifest['run_id']}, not run {run_id}")
    present = {p.name for p in folder.iterdir() if not p.name.startswith(".")} - {"manifest.json"}
    if present != set(manifest["files"]):
        raise Inconsistent(f"{folder.name}: files differ from the manifest: {sorted(present ^ set(manifest['files']))}")
    for name, entry in manifest["files"].items():
        if hashlib.sha256((folder / name).read_bytes()).hexdigest() != entry["sha256"]:
            raise Inconsistent(f"{folder.name}/{name} is not the file run {run_id} wrote")
    crosswalk = pd.read_csv(folder / "crosswalk.csv", dtype=str, keep_default_na=False)
    merged = pd.read_csv(folder / "merged.csv", dtype={"entity_id": str}, usecols=["entity_id"])
    clusters = pd.read_csv(folder / "clusters.csv", dtype={"entity_id": str}, usecols=["entity_id"])
    provenance = pd.read_parquet(folder / "provenance.parquet", columns=["entity_id"])
    records = pd.read_parquet(folder / "records.parquet", columns=["_record_id"])
    entities = set(crosswalk["entity_id"])
    if set(merged["entity_id"]) != entities or len(merged) != len(entities):
        raise Inconsistent(f"merged and crosswalk name different entities ({len(set(merged['entity_id']) ^ entities)})")
    if set(clusters["entity_id"]) != entities or not set(provenance["entity_id"]) <= entities:
        raise Inconsistent("clusters or provenance name entities the crosswalk does not have")
    if len(records) != len(crosswalk):
        raise Inconsistent("records and crosswalk differ in length")
    if not _keyed(crosswalk).equals(_keyed(_state_crosswalk(root, run_id))):
        raise Inconsistent(f"crosswalk.csv is not the crosswalk the state store holds for run {run_id}")
    return _keyed(crosswalk)


@dataclass
class SetView:
    current_run: int  # the run out/current leads to
    last_run: int  # the state store's last run (what show, review, evaluate read)
    crosswalk: pd.DataFrame  # the current set's

    @property
    def pointer_behind(self) -> bool:
        return self.current_run != self.last_run


def check_set(root: Path) -> SetView:
    """Check the output folder: out/current and the last recorded run are complete, recorded sets.

    The one in-between state allowed: the state row of the newest run is committed but the pointer
    still leads to the run before it (a kill between the two; the next start switches it).
    """
    out = root / "out"
    runs, integrity = _state(root)
    if integrity != "ok":
        raise Inconsistent(f"state database integrity_check: {integrity}")
    if not runs:
        raise Inconsistent("no run recorded")
    last = max(runs)
    _complete(root, Path(runs[last]), last)  # readers that follow the state store
    folder = (out / "current").resolve()
    if not (out / "current").is_symlink() or not folder.is_dir():
        raise Inconsistent("out/current does not lead to a run folder")
    current = next((i for i, d in runs.items() if d and Path(d).resolve() == folder), None)
    if current is None:
        raise Inconsistent(f"out/current leads to {folder.name}, which no recorded run wrote")
    if current not in (last, last - 1):
        raise Inconsistent(f"out/current leads to run {current}, the last recorded run is {last}")
    crosswalk = _complete(root, folder, current)
    for name in json.loads((folder / "manifest.json").read_text(encoding="utf-8"))["files"]:
        stable = out / name
        if not stable.exists() or stable.resolve() != folder / name:
            raise Inconsistent(f"out/{name} does not lead to the current run's file")
    latest = root / "reports" / "latest.html"
    if latest.resolve() != folder / "report.html":
        raise Inconsistent("reports/latest.html is not the current run's report")
    return SetView(current, last, crosswalk)


def leftovers(root: Path) -> list[str]:
    """Temporary files and unfinished or unrecorded run folders."""
    out = root / "out"
    found = [str(p.relative_to(root)) for folder in (out, root / "reports", *out.glob("runs/*"))
             if folder.is_dir() for p in folder.glob(".*.tmp")]
    found += [str(p.relative_to(root)) for p in out.glob("runs/*.partial")]
    with sqlite3.connect(root / ".integrate" / "state.sqlite") as db:
        recorded = {str(Path(r[0]).resolve()) for r in db.execute("SELECT output_dir FROM run") if r[0]}
    found += [str(p.relative_to(root)) for p in out.glob("runs/run-*")
              if p.is_dir() and str(p.resolve()) not in recorded and p.resolve() != (out / "current").resolve()]
    return found


# --- the campaign ---------------------------------------------------------------------------

@dataclass
class Case:
    point: str
    workspace: str
    killed: bool = False
    left: str = ""  # previous / new
    temporaries: int = 0
    pointer_behind: bool = False  # the new run was recorded, the pointer not yet switched
    problems: list[str] = field(default_factory=list)
    seconds: float = 0.0


def _spec(point: str) -> dict[str, object]:
    if point.startswith("rename#"):
        return {"strace_when": int(point.split("#", 1)[1])}
    return {"kill_at": point}


def campaign(template: Path, label: str, points: list[str], work: Path, log=print, fork: bool = False
             ) -> list[Case]:
    """Run the kill cases of ``points`` one after another on a copy of ``template``.

    ``fork``: start the runs by forking this process (after ``preload``) instead of a new
    interpreter; rename injection (strace) always starts the real command.
    """
    if fork:
        preload()
    reference, chain = work / f"{label}-reference", work / f"{label}-killed"
    for target in (reference, chain):
        shutil.rmtree(target, ignore_errors=True)
        shutil.copytree(template, target)
    expected: list[pd.DataFrame] = []
    for k in range(len(points) + 1):  # the uninterrupted runs: the entity IDs every case must reach
        if k:
            add_record(reference, k)
        outcome = run(reference, fork=fork)
        if outcome.returncode != 0:
            raise RuntimeError(f"reference run failed: {outcome.stderr[-2000:]}")
        expected.append(check_set(reference).crosswalk)
    if run(chain, fork=fork).returncode != 0:
        raise RuntimeError("first run failed")
    previous_id = check_set(chain).current_run
    cases: list[Case] = []
    for k, point in enumerate(points, start=1):
        case = Case(point, label)
        add_record(chain, k)
        outcome = run(chain, fork=fork, **_spec(point))  # type: ignore[arg-type]
        case.killed, case.seconds = outcome.killed, outcome.seconds
        if not outcome.killed and outcome.returncode != 0:
            case.problems.append(f"run failed without a kill (exit {outcome.returncode}): {outcome.stderr[-500:]}")
        case.temporaries = len([p for p in leftovers(chain) if p.endswith(".tmp")])
        try:
            view = check_set(chain)
            run_id = view.current_run
            case.left = "previous" if run_id == previous_id else "new" if run_id == previous_id + 1 else f"run {run_id}"
            case.pointer_behind = view.pointer_behind
            wanted = expected[k - 1] if case.left == "previous" else expected[k]
            if case.left not in ("previous", "new") or view.last_run not in (previous_id, previous_id + 1):
                case.problems.append(f"after the kill: unexpected run {run_id} (last recorded {view.last_run})")
            elif not view.crosswalk.equals(wanted):
                case.problems.append(f"after the kill: entity IDs differ from the uninterrupted run ({case.left} set)")
        except Inconsistent as exc:
            case.problems.append(f"after the kill: {exc}")
        again = run(chain, fork=fork)
        if again.returncode != 0:
            case.problems.append(f"next run failed (exit {again.returncode}): {again.stderr[-500:]}")
        else:
            try:
                view = check_set(chain)
                previous_id = view.current_run
                if view.pointer_behind:
                    case.problems.append("next run: out/current is not the last recorded run")
                if not view.crosswalk.equals(expected[k]):
                    case.problems.append("next run: entity IDs differ from the uninterrupted run's")
            except Inconsistent as exc:
                case.problems.append(f"next run: {exc}")
            rest = leftovers(chain)
            if rest:
                case.problems.append(f"next run left {rest[:5]}")
        verdict = "OK" if not case.problems else "FAIL: " + "; ".join(case.problems)
        log(f"{label:<6} {point:<22} killed={'yes' if case.killed else 'no ':<3} left={case.left:<8} "
            f"tmp={case.temporaries:<2} {'behind ' if case.pointer_behind else ''}{verdict}")
        cases.append(case)
    return cases


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=int, default=120, help="records per source in the small workspace")
    parser.add_argument("--demo-points", type=int, default=4, help="cases also run on the full demo")
    parser.add_argument("--renames", type=int, default=20, help="rename system calls to kill at (strace)")
    parser.add_argument("--no-strace", action="store_true", help="named points only")
    parser.add_argument("--points", nargs="*", help="only these points (names as printed)")
    parser.add_argument("--fresh", action="store_true",
                        help="start every run as a new interpreter (default: fork this pre-loaded process; "
                             "rename-injection cases always start the real command)")
    args = parser.parse_args(argv)
    points = named_points()
    if not args.no_strace:
        if strace_available():
            points += [f"rename#{n}" for n in range(1, args.renames + 1)]
        else:
            print("strace is not installed: the rename-injection cases are skipped")
    if args.points:
        points = [p for p in points if p in args.points]
    demo_points = ["write:rename@5", "state:crosswalk", "pointer:current", "rename#3"][: args.demo_points]
    if args.no_strace or not strace_available():
        demo_points = [p for p in demo_points if not p.startswith("rename#")]
    start = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="kill-harness-") as tmp:
        work = Path(tmp)
        small = small_workspace(work / "small-template", args.rows)
        cases = campaign(small, "small", points, work, fork=not args.fresh)
        if demo_points:
            cases += campaign(demo_workspace(work / "demo-template"), "demo", demo_points, work, fork=not args.fresh)
    elapsed = time.perf_counter() - start
    killed = [c for c in cases if c.killed]
    failed = [c for c in cases if c.problems]
    print()
    print(f"kill points tried      {len(cases)} ({sum(c.workspace == 'demo' for c in cases)} on the full demo, "
          f"{sum(c.point.startswith('rename#') for c in cases)} by rename injection)")
    print(f"killed as planned      {len(killed)}")
    print(f"left previous set      {sum(c.left == 'previous' for c in killed)}")
    print(f"left new set           {sum(c.left == 'new' for c in killed)}")
    print(f"recorded, pointer behind {sum(c.pointer_behind for c in killed)} (switched by the next run's start)")
    print(f"mixed or unrecorded    {sum(any('after the kill' in p for p in c.problems) for c in cases)}")
    print(f"next run failed/wrong  {sum(any(p.startswith('next run') for p in c.problems) for c in cases)}")
    print(f"kills that left .tmp   {sum(c.temporaries > 0 for c in killed)} (all removed by the next run)"
          if not failed else f"kills that left .tmp   {sum(c.temporaries > 0 for c in killed)}")
    print(f"wall time              {elapsed:.0f} s")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
