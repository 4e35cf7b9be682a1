"""Run jobs: start one per workspace at a time, follow it, cancel it, recover after a restart.

Each job runs in a worker process (``integrate.service.worker``) that records its progress in
the workspace's state store (``service_job``); this module starts workers and watches them. The
state store is the only place a job's state lives, so a restarted server sees every job, and a
job the previous server left queued or running is marked failed (its worker died with it).
"""

from __future__ import annotations

import os
import subprocess
import sys
import threading
from pathlib import Path
from typing import Any

from ..pipeline import STAGES
from .store import JobStore

ABANDONED = "error: the server stopped while this run was in progress; the previous outputs are unchanged"


def _worker_env() -> dict[str, str]:
    """This process's environment, with this package importable from the worker's folder too."""
    env = dict(os.environ)
    here = str(Path(__file__).resolve().parents[2])
    env["PYTHONPATH"] = os.pathsep.join([here] + [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p])
    return env


class JobRunner:
    """Starts and watches the run jobs of one workspace."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self.store = JobStore.for_workspace(root)
        self._lock = threading.Lock()
        self._processes: dict[str, subprocess.Popen[bytes]] = {}

    def recover(self) -> int:
        """Mark jobs of a previous server failed (call once at start, before taking requests)."""
        return self.store.fail_abandoned(ABANDONED)

    def start(self, requested_by: str | None, *, incremental: bool = False, refit: bool = False
              ) -> tuple[dict[str, Any], bool]:
        """A new job (True), or the one already queued or running for this workspace (False)."""
        with self._lock:
            job = self.store.create(len(STAGES), requested_by)
            if not job.pop("created"):
                return job, False
            command = [sys.executable, "-m", "integrate.service.worker", str(self.root), job["job_id"],
                       str(os.getpid())] + (["incremental"] if incremental else []) + (["refit"] if refit else [])
            try:
                process = subprocess.Popen(command, stdin=subprocess.DEVNULL, cwd=str(self.root), env=_worker_env())
            except OSError as exc:
                self.store.finish(job["job_id"], "failed", error=f"error: could not start the run: {exc}")
                return self.store.get(job["job_id"]) or job, True
            self._processes[job["job_id"]] = process
        threading.Thread(target=self._watch, args=(job["job_id"], process), daemon=True).start()
        return job, True

    def _watch(self, job_id: str, process: subprocess.Popen[bytes]) -> None:
        code = process.wait()
        self._processes.pop(job_id, None)
        # a worker that died without recording an end (killed, out of memory) leaves a failed job
        self.store.finish(job_id, "failed", error=f"error: the run's process stopped unexpectedly (exit code {code});"
                                                  " the previous outputs are unchanged")

    def cancel(self, job_id: str) -> dict[str, Any] | None:
        job = self.store.get(job_id)
        if job is None:
            return None
        if job["state"] == "queued" and job_id not in self._processes:
            self.store.finish(job_id, "cancelled", error="the run was cancelled before it started")
        elif job["state"] in ("queued", "running"):
            self.store.update(job_id, cancel_requested=1)
        return self.store.get(job_id)

    def stop_all(self, timeout: float = 10.0) -> None:
        """Ask running workers to stop and wait for them (the server is shutting down)."""
        for job_id in list(self._processes):
            self.store.update(job_id, cancel_requested=1)
        for process in list(self._processes.values()):
            try:
                process.wait(timeout=timeout)
            except subprocess.TimeoutExpired:
                process.kill()
