"""Run folders, the one pointer, pruning and the clean-up after a killed run (outputs/publish.py)."""

from __future__ import annotations

import os
from pathlib import Path

from integrate.outputs import publish


def _set(out: Path, run_id: int, reports: Path) -> Path:
    partial = publish.start_run_folder(out, run_id)
    (partial / "merged.csv").write_text(f"entity_id\nE{run_id}\n", encoding="utf-8")
    publish.write_report_file(partial, f"<p>run {run_id}</p>")
    folder = publish.seal_run_folder(partial, run_id, "2026-01-01T00:00:00Z")
    return folder


def _publish(out: Path, reports: Path, run_id: int) -> Path:
    folder = _set(out, run_id, reports)
    publish.switch_current(out, folder)
    publish.publish_report(reports, reports / f"run-{run_id}.html", out)
    return folder


def test_the_stable_paths_follow_the_pointer_and_old_folders_are_pruned(tmp_path: Path) -> None:
    out, reports = tmp_path / "out", tmp_path / "reports"
    for run_id in range(1, 6):
        _publish(out, reports, run_id)
        assert (out / "merged.csv").read_text(encoding="utf-8") == f"entity_id\nE{run_id}\n"
        assert (reports / "latest.html").read_text(encoding="utf-8") == f"<p>run {run_id}</p>"
    removed = publish.prune(out, 2)
    assert sorted(p.name for p in removed) == ["run-000001", "run-000002", "run-000003"]
    assert sorted(p.name for p in (out / "runs").iterdir()) == ["run-000004", "run-000005"]
    assert os.readlink(out / "current") == "runs/run-000005"


def test_the_next_start_cleans_up_and_finishes_an_interrupted_switch(tmp_path: Path) -> None:
    out, reports = tmp_path / "out", tmp_path / "reports"
    first = _publish(out, reports, 1)
    second = _set(out, 2, reports)  # recorded (below), killed before the pointer switched
    orphan = _set(out, 3, reports)  # written, never recorded
    partial = publish.start_run_folder(out, 4)  # killed while writing
    (partial / ".merged.csv.x.tmp").write_text("personal data", encoding="utf-8")
    (out / ".merged.csv.y.tmp").write_text("personal data", encoding="utf-8")
    (reports / ".latest.html.z.tmp").write_text("personal data", encoding="utf-8")
    recorded = [str(first), str(second)]
    found = publish.recover(out, reports, recorded, {str(second): str(reports / "run-2.html")})
    assert found.switched_to == second
    assert not orphan.exists() and not partial.exists()
    assert not list(out.rglob(".*.tmp")) and not list(reports.glob(".*.tmp"))
    assert len(found.temporary_files) == 3
    assert (out / "merged.csv").read_text(encoding="utf-8") == "entity_id\nE2\n"
    assert (reports / "run-2.html").read_text(encoding="utf-8") == "<p>run 2</p>"
    assert (reports / "latest.html").read_text(encoding="utf-8") == "<p>run 2</p>"


def test_outputs_from_before_run_folders_become_the_current_set(tmp_path: Path) -> None:
    out, reports = tmp_path / "out", tmp_path / "reports"
    out.mkdir()
    (out / "merged.csv").write_text("entity_id\nOLD\n", encoding="utf-8")
    publish.recover(out, reports, [str(out)], {})
    assert (out / "merged.csv").is_symlink()
    assert (out / "merged.csv").read_text(encoding="utf-8") == "entity_id\nOLD\n"
    assert (out / "current").resolve() == out / "runs" / publish.LEGACY


def test_the_legacy_set_is_pruned_first(tmp_path: Path) -> None:
    out, reports = tmp_path / "out", tmp_path / "reports"
    out.mkdir()
    (out / "merged.csv").write_text("entity_id\nOLD\n", encoding="utf-8")
    publish.recover(out, reports, [str(out)], {})
    for run_id in (1, 2):
        _publish(out, reports, run_id)
    publish.prune(out, 2)
    assert sorted(p.name for p in (out / "runs").iterdir()) == ["run-000001", "run-000002"]
