"""Publish a run's outputs as one set: a new run folder, the state row, then one pointer switched.

Layout of an output folder (``out/`` by default)::

    out/current            -> runs/run-000042     the one pointer (a symlink, switched by rename)
    out/merged.csv         -> current/merged.csv  fixed links: the stable paths users read
    out/runs/run-000042/   merged.csv ... report.html manifest.json
    out/runs/run-000041/   the previous set (old sets are pruned to INTEGRATE_KEEP_RUNS)

Order of a run's writes, chosen so that a kill at any moment leaves a complete, recorded set:

1. every file into ``runs/run-N.partial/`` (fsynced), the run report into it, ``manifest.json``
   (run number and SHA-256 of every file) last; the folder fsynced and renamed to ``run-N``;
2. the state row, in one transaction (the commit point: SQLite ``synchronous=FULL``);
3. ``current`` switched to ``runs/run-N`` (a new symlink renamed over the old one), the report
   copied to ``reports/run-<time>.html`` and ``reports/latest.html`` linked to ``current``;
4. old run folders pruned.

A kill before 2 leaves the previous set current and recorded (the new folder is removed by the
next run's ``recover``); a kill after 2 leaves the new set recorded, and ``recover`` finishes 3.
Readers that must see one set follow the state store's last run (``current_output_folder``).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from ..killpoints import reached
from .tables import fsync_dir, write_atomic

RUNS_DIR = "runs"
CURRENT = "current"
MANIFEST = "manifest.json"
REPORT = "report.html"
LATEST = "latest.html"
PARTIAL = ".partial"
LEGACY = "run-legacy"  # the set a workspace had before run folders existed
KEEP_RUNS_ENV = "INTEGRATE_KEEP_RUNS"
DEFAULT_KEEP_RUNS = 3


def run_folder_name(run_id: int) -> str:
    return f"run-{run_id:06d}"


def keep_runs(value: int | None = None) -> int:
    """How many run folders to keep: ``value``, else ``INTEGRATE_KEEP_RUNS``, else 3 (at least 1)."""
    if value is None:
        text = os.environ.get(KEEP_RUNS_ENV, "").strip()
        value = int(text) if text.isdigit() else DEFAULT_KEEP_RUNS
    return max(1, int(value))


def sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _link(path: Path, target: str) -> None:
    """Point the symlink ``path`` at ``target`` atomically (a new link renamed over the old entry)."""
    tmp = Path(tempfile.mktemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent))
    os.symlink(target, tmp)
    try:
        os.replace(tmp, path)
    finally:
        if tmp.is_symlink():
            tmp.unlink()


def _remove(path: Path) -> None:
    if path.is_symlink() or path.is_file():
        path.unlink()
    elif path.is_dir():
        shutil.rmtree(path, ignore_errors=True)


# --- writing a run folder -------------------------------------------------------------------

def start_run_folder(out_dir: Path, run_id: int) -> Path:
    """A fresh, empty ``runs/run-N.partial`` folder to write the set into."""
    runs = out_dir / RUNS_DIR
    runs.mkdir(parents=True, exist_ok=True)
    folder = runs / (run_folder_name(run_id) + PARTIAL)
    _remove(folder)
    folder.mkdir()
    return folder


def seal_run_folder(partial: Path, run_id: int, started_at: str) -> Path:
    """Write the manifest, fsync the folder and give it its final name; returns that folder."""
    files = sorted(p for p in partial.iterdir() if p.is_file() and not p.name.startswith("."))
    manifest = {"run_id": run_id, "started_at": started_at,
                "files": {p.name: {"sha256": sha256(p), "bytes": p.stat().st_size} for p in files}}
    write_atomic(partial / MANIFEST, lambda p: p.write_text(json.dumps(manifest, indent=1, sort_keys=True),
                                                            encoding="utf-8"))
    reached("publish:manifest")
    fsync_dir(partial)
    final = partial.with_name(partial.name[: -len(PARTIAL)])
    _remove(final)
    os.replace(partial, final)
    fsync_dir(final.parent)
    reached("publish:folder")
    return final


def write_report_file(folder: Path, html: str) -> Path:
    path = folder / REPORT
    write_atomic(path, lambda p: p.write_text(html, encoding="utf-8"))
    reached("publish:report")
    return path


# --- switching the pointer ------------------------------------------------------------------

def switch_current(out_dir: Path, run_folder: Path, *, points: bool = True) -> None:
    """Make ``out/current`` point at ``run_folder`` and give every file of it a stable link.

    ``points=False`` (recovery at a run's start) passes no kill points, so that each named point
    stays the publish step it is named after.
    """
    target = os.path.relpath(run_folder, out_dir)
    pointer = out_dir / CURRENT
    if not (pointer.is_symlink() and os.readlink(pointer) == target):
        _link(pointer, target)
        fsync_dir(out_dir)
    if points:
        reached("pointer:current")
    changed = False
    for path in sorted(run_folder.iterdir()):
        if path.name.startswith(".") or path.name == MANIFEST:
            continue
        stable = out_dir / path.name
        wanted = f"{CURRENT}/{path.name}"
        if not (stable.is_symlink() and os.readlink(stable) == wanted):
            _link(stable, wanted)
            changed = True
    for stable in out_dir.iterdir():  # links to files the current set no longer has
        if stable.is_symlink() and os.readlink(stable).startswith(CURRENT + "/") and not stable.exists():
            stable.unlink()
            changed = True
    if changed:
        fsync_dir(out_dir)


def publish_report(reports_dir: Path, report_path: Path, out_dir: Path, *, points: bool = True) -> None:
    """Copy the run's report to ``report_path`` and link ``latest.html`` to the current set's report."""
    source = out_dir / CURRENT / REPORT
    reports_dir.mkdir(parents=True, exist_ok=True)
    if not report_path.exists():
        write_atomic(report_path, lambda p: shutil.copyfile(source, p))
    if points:
        reached("pointer:report")
    latest = reports_dir / LATEST
    target = os.path.relpath(source, reports_dir)
    if not (latest.is_symlink() and os.readlink(latest) == target):
        _link(latest, target)
        fsync_dir(reports_dir)
    if points:
        reached("pointer:latest")


def prune(out_dir: Path, keep: int) -> list[Path]:
    """Remove all but the newest ``keep`` run folders (never the current one)."""
    runs = out_dir / RUNS_DIR
    current = (out_dir / CURRENT).resolve()
    folders = sorted((p for p in runs.glob("run-*") if p.is_dir() and not p.name.endswith(PARTIAL)),
                     key=lambda p: (p.name != LEGACY, p.name), reverse=True)  # the legacy set is oldest
    removed = [p for p in folders[keep:] if p.resolve() != current]
    for folder in removed:
        shutil.rmtree(folder, ignore_errors=True)
    if removed:
        fsync_dir(runs)
    reached("prune")
    return removed


# --- the next start: clean up and finish what a killed run left ------------------------------

@dataclass
class Recovery:
    """What ``recover`` found and did."""

    temporary_files: list[Path] = field(default_factory=list)
    discarded_folders: list[Path] = field(default_factory=list)
    switched_to: Path | None = None

    def __bool__(self) -> bool:
        return bool(self.temporary_files or self.discarded_folders or self.switched_to)


def _temporaries(folder: Path) -> list[Path]:
    if not folder.is_dir():
        return []
    return [p for p in folder.glob(".*.tmp") if p.is_file() or p.is_symlink()]


def _migrate_legacy(out_dir: Path) -> None:
    """Turn the plain files of a workspace from before run folders into a run folder of their own."""
    if (out_dir / CURRENT).is_symlink() or not out_dir.is_dir():
        return
    if (out_dir / CURRENT).is_dir():  # a copy that followed the links: the plain files hold the same set
        shutil.rmtree(out_dir / CURRENT)
    plain = sorted(p for p in out_dir.iterdir() if p.is_file() and not p.is_symlink() and not p.name.startswith("."))
    if not plain:
        return
    legacy = out_dir / RUNS_DIR / LEGACY
    legacy.mkdir(parents=True, exist_ok=True)
    for path in plain:  # a second name for each file: the old set stays readable at every moment
        if not (legacy / path.name).exists():
            try:
                os.link(path, legacy / path.name)
            except OSError:
                shutil.copy2(path, legacy / path.name)
    fsync_dir(legacy)
    switch_current(out_dir, legacy, points=False)


def recover(out_dir: Path, reports_dir: Path, recorded: list[str], report_of: dict[str, str]) -> Recovery:
    """Clean up after a killed run; call at the start of a run, holding the run lock.

    Args:
        out_dir: the output folder this run writes.
        reports_dir: the workspace's reports folder.
        recorded: output folders of the runs in the state store, oldest first.
        report_of: output folder -> the report path the state store gave that run.
    """
    found = Recovery()
    runs = out_dir / RUNS_DIR
    for folder in (out_dir, reports_dir, *([p for p in runs.iterdir() if p.is_dir()] if runs.is_dir() else [])):
        for tmp in _temporaries(folder):  # copies of personal data a killed write left behind
            tmp.unlink()
            found.temporary_files.append(tmp)
    if runs.is_dir():
        for partial in runs.glob("*" + PARTIAL):
            _remove(partial)
            found.discarded_folders.append(partial)
    _migrate_legacy(out_dir)
    known = {str(Path(p).resolve()) for p in recorded if p}
    mine = [Path(p) for p in recorded if p and Path(p).resolve().parent == runs.resolve() and Path(p).is_dir()]
    if mine:  # the last recorded set here is the current one, whether or not its pointer was switched
        last = mine[-1]
        current = out_dir / CURRENT
        if not current.exists() or current.resolve() != last.resolve():
            found.switched_to = last
        switch_current(out_dir, last, points=False)
        report = report_of.get(str(last))
        if report:
            publish_report(reports_dir, Path(report), out_dir, points=False)
    if runs.is_dir():
        pointed = (out_dir / CURRENT).resolve() if (out_dir / CURRENT).exists() else None
        for folder in runs.glob("run-*"):
            resolved = folder.resolve()
            if folder.is_dir() and str(resolved) not in known and resolved != pointed:
                shutil.rmtree(folder, ignore_errors=True)  # written, never recorded: a killed run's
                found.discarded_folders.append(folder)
        if found.discarded_folders:
            fsync_dir(runs)
    return found


# --- readers --------------------------------------------------------------------------------

def current_output_folder(workspace: str | Path, out: str | Path | None = None, *, default: Path | None = None
                          ) -> Path:
    """The folder holding the outputs to read: ``out``, else the last recorded run's, else the schema's.

    ``default``: the schema's output folder when the caller knows it (else the workspace is loaded).

    The last recorded run's folder is one complete set even while a run is publishing the next.
    """
    if out:
        out_path = Path(out)
        current = out_path / CURRENT
        return current.resolve() if current.is_symlink() and current.is_dir() else out_path
    from ..state import StateStore

    store = StateStore.existing(workspace)
    last = store.last_run() if store is not None else None
    if last is not None and last.output_dir and Path(last.output_dir).is_dir():
        return Path(last.output_dir)
    if default is None:
        from ..workspace import load_workspace

        default = load_workspace(workspace).output_dir
    folder = default
    current = folder / CURRENT  # a copy that followed the links has a plain folder here: read the copy's files
    return current.resolve() if current.is_symlink() and current.is_dir() else folder
