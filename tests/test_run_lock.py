"""Two runs on one workspace at the same time: the second refuses at once (issue: concurrency)."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from integrate.state import LOCK_STALE_SECONDS, RunLock, RunLocked, StateStore, run_lock_table

from .conftest import copy_workspace


def _start(root: Path, **env: str) -> subprocess.Popen:
    clean = {k: v for k, v in os.environ.items() if not k.startswith("INTEGRATE_")}
    return subprocess.Popen([sys.executable, "-m", "integrate", "run", str(root)], env={**clean, **env},
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _lock_holder(root: Path) -> int | None:
    path = root / ".integrate" / "state.sqlite"
    if not path.exists():
        return None
    try:
        with sqlite3.connect(path, timeout=5) as db:
            row = db.execute("SELECT pid FROM run_lock").fetchone()
    except sqlite3.OperationalError:
        return None  # the table is not made yet
    return row[0] if row else None


def test_a_second_run_refuses_at_once_and_a_killed_holder_frees_the_lock(tmp_path: Path) -> None:
    root = copy_workspace(tmp_path / "ws")
    first = _start(root, INTEGRATE_TEST_PAUSE_AT="stage:score=120")  # holds the lock for two minutes
    try:
        deadline = time.monotonic() + 120
        while _lock_holder(root) != first.pid:
            assert first.poll() is None, first.communicate()
            assert time.monotonic() < deadline, "the first run never took the lock"
            time.sleep(0.2)
        started = time.monotonic()
        second = _start(root)
        _, err = second.communicate(timeout=100)
        waited = time.monotonic() - started
        assert second.returncode == 3, err
        assert "another run of this workspace is in progress" in err and str(first.pid) in err
        assert "Traceback" not in err
        assert waited < 100  # refused without waiting for the first run (paused for 120 s)
        assert first.poll() is None  # ... which is still running
    finally:
        first.send_signal(signal.SIGKILL)
        first.communicate()
    assert _lock_holder(root) == first.pid  # a killed run leaves its row behind ...
    third = _start(root)
    out, err = third.communicate(timeout=600)
    assert third.returncode == 0, err  # ... and the next run on this host takes it over at once
    assert _lock_holder(root) is None  # released at the end


def test_a_lock_held_elsewhere_is_taken_over_only_when_its_heartbeat_is_stale(tmp_path: Path) -> None:
    store = StateStore.for_workspace(tmp_path)
    with store.engine.begin() as conn:
        conn.execute(run_lock_table.insert().values(lock_id=1, token="x" * 32, pid=1, host="another-host.example",
                                                    started_at="2026-01-01T00:00:00Z", heartbeat=time.time()))
    with pytest.raises(RunLocked, match="another-host.example"):
        RunLock(store).acquire()
    with store.engine.begin() as conn:
        conn.execute(run_lock_table.update().values(heartbeat=time.time() - LOCK_STALE_SECONDS - 1))
    lock = RunLock(store).acquire()
    lock.release()
    with store.engine.connect() as conn:
        assert conn.execute(run_lock_table.select()).first() is None
