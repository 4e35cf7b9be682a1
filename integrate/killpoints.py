"""Named points where a test can kill the run, to prove that a kill anywhere leaves a consistent set.

The environment variable ``INTEGRATE_TEST_KILL_AT`` names one point, optionally with the how-many-th
time it is reached: ``write:file@3`` kills the process (SIGKILL, no clean-up of any kind) the third
time the run reaches ``write:file``. Unset (always, outside tests), ``reached`` costs one dictionary
look-up. ``benchmarks/kill_harness.py`` and ``tests/test_kill_harness.py`` drive it.

Points (in the order a run reaches them): ``stage:<name>`` at the start of each stage of
``pipeline.STAGES``; ``write:file`` after each output file is written and before it is renamed;
``write:rename`` after each rename; ``publish:report``, ``publish:manifest`` (run folder complete,
not yet fsynced), ``publish:folder`` (run folder renamed to its final name); ``state:run`` and
``state:crosswalk`` inside the state-store transaction, ``state:commit`` after it; ``pointer:current``
after the output pointer switched; ``pointer:report`` after the report copy; ``pointer:latest``
after ``latest.html``; ``prune`` after old run folders were removed.

``INTEGRATE_TEST_PAUSE_AT=<point>=<seconds>`` instead sleeps there (the first time), so that a
test can start a second run while the first one holds the workspace.
"""

from __future__ import annotations

import os
import signal
import time

KILL_ENV = "INTEGRATE_TEST_KILL_AT"
PAUSE_ENV = "INTEGRATE_TEST_PAUSE_AT"
_seen: dict[str, int] = {}
_paused: set[str] = set()


def _target() -> tuple[str, int] | None:
    spec = os.environ.get(KILL_ENV, "").strip()
    if not spec:
        return None
    name, _, nth = spec.partition("@")
    return name, int(nth) if nth.isdigit() else 1


def reached(point: str) -> None:
    """Mark that the run reached ``point``; kills the process here when a test asked for it."""
    pause = os.environ.get(PAUSE_ENV, "")
    if pause:
        name, _, seconds = pause.partition("=")
        if name == point and point not in _paused:
            _paused.add(point)
            time.sleep(float(seconds or 0))
    target = _target()
    if target is None or target[0] != point:
        return
    _seen[point] = _seen.get(point, 0) + 1
    if _seen[point] == target[1]:
        os.kill(os.getpid(), signal.SIGKILL)
