"""Runs killed at any moment leave one complete, recorded output set (issue: mixed outputs).

Fast version of ``benchmarks/kill_harness.py`` (see there for what is checked): every stage and
the publish steps on a small copy of the demo, one rename system call killed through strace, and
one point on the full demo. The full campaign (67 points) is the benchmark.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent


def _harness():  # noqa: ANN202 - the benchmark module
    spec = importlib.util.spec_from_file_location("kill_harness", REPO / "benchmarks" / "kill_harness.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules["kill_harness"] = module
    spec.loader.exec_module(module)
    return module


H = _harness()


def _assert_clean(cases) -> None:  # noqa: ANN001
    problems = [f"{c.workspace} {c.point}: {'; '.join(c.problems)}" for c in cases if c.problems]
    assert not problems, "\n".join(problems)
    assert all(c.killed for c in cases), [c.point for c in cases if not c.killed]


def test_a_kill_in_each_stage_and_publish_step_leaves_one_recorded_set(tmp_path: Path) -> None:
    small = H.small_workspace(tmp_path / "template", rows=40)
    points = [f"stage:{s}" for s in H.STAGES] + [
        "write:file@3", "write:rename@7", "publish:folder", "state:crosswalk", "state:commit", "pointer:current"]
    cases = H.campaign(small, "small", points, tmp_path, log=lambda _: None, fork=True)
    _assert_clean(cases)
    left = {c.point: c.left for c in cases}
    # before the state row the previous set stays; from the commit on the new one is the recorded set
    assert left["write:rename@7"] == left["state:crosswalk"] == "previous"
    assert left["pointer:current"] == "new"
    assert next(c for c in cases if c.point == "state:commit").pointer_behind
    # temporary copies of personal data were left by the kill mid-write, and cleaned by the next run
    assert next(c for c in cases if c.point == "write:rename@7").temporaries > 0


@pytest.mark.skipif(not H.strace_available(), reason="strace is not installed (apt-get install strace)")
def test_a_rename_killed_by_strace_leaves_one_recorded_set(tmp_path: Path) -> None:
    small = H.small_workspace(tmp_path / "template", rows=40)
    cases = H.campaign(small, "small", ["rename#3"], tmp_path, log=lambda _: None, fork=True)
    _assert_clean(cases)


def test_a_kill_while_publishing_the_demo_leaves_one_recorded_set(tmp_path: Path) -> None:
    demo = H.demo_workspace(tmp_path / "template")
    cases = H.campaign(demo, "demo", ["write:rename@5"], tmp_path, log=lambda _: None, fork=True)
    _assert_clean(cases)
