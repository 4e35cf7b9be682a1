"""One run job in a process of its own: ``python -m integrate.service.worker WORKSPACE JOB_ID PARENT_PID``.

The server starts this for each run it is asked for, so a run never holds up the server's
requests (the run is CPU-bound). The worker runs ``run_pipeline`` — the same function ``integrate
run`` calls — and writes its progress into the job's row in the state store, where the server
reads it for polling and for the event stream.

- Cancel: the server sets the row's ``cancel_requested``; the progress callback sees it when the
  next stage starts and stops the run before anything is written (a cancel asked for once the
  outputs are being written comes too late and the run finishes).
- The server gone: the worker dies with it (Linux parent-death signal, and a watcher thread that
  notices a new parent), so a restarted server may mark the job failed knowing nothing still runs.
"""

from __future__ import annotations

import ctypes
import logging
import os
import signal
import sys
import threading
import time
import traceback

from ..errors import InputError, InputErrors, IntegrateError
from .store import JobStore, now_iso

log = logging.getLogger(__name__)
_PR_SET_PDEATHSIG = 1
WORKER_NICE = 10  # added to the worker's niceness (lower CPU priority than the server)


class RunCancelled(IntegrateError):
    """The job was cancelled before its outputs were written."""


def _die_with_parent(parent: int) -> None:
    try:
        ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    except (OSError, AttributeError):  # not Linux: the watcher thread below still works
        pass

    def watch() -> None:
        while True:
            if os.getppid() != parent:
                os._exit(137)
            time.sleep(0.2)

    if os.getppid() != parent:
        os._exit(137)
    threading.Thread(target=watch, daemon=True).start()


def cli_message(exc: BaseException) -> str:
    """The error as ``integrate run`` prints it."""
    if isinstance(exc, IntegrateError | InputError | InputErrors):
        return f"error: {exc}"
    return f"error: internal error ({type(exc).__name__}: {exc}); please report it"


def run_job(workspace: str, job_id: str, *, incremental: bool = False, refit: bool = False) -> int:
    from ..pipeline import STAGES, run_pipeline

    jobs = JobStore.for_workspace(workspace)
    timings: dict[str, float] = {}
    clock: dict[str, float | str] = {"at": time.perf_counter(), "stage": ""}

    def progress(stage: str) -> None:
        now = time.perf_counter()
        if clock["stage"]:
            name = str(clock["stage"])
            timings[name] = round(timings.get(name, 0.0) + now - float(clock["at"]), 4)
        clock["at"], clock["stage"] = now, stage
        if stage != "done" and jobs.cancel_requested(job_id):
            raise RunCancelled("the run was cancelled; the previous outputs are unchanged")
        index = STAGES.index(stage) if stage in STAGES else len(STAGES)
        jobs.update(job_id, stage=stage, stage_index=index, timings=timings)

    jobs.update(job_id, state="running", started_at=now_iso(), pid=os.getpid(), stages_total=len(STAGES))
    try:
        result = run_pipeline(workspace, progress=progress, incremental=incremental, refit=refit)
    except RunCancelled as stop:
        jobs.finish(job_id, "cancelled", error=str(stop), timings=timings)
        return 0
    except Exception as exc:  # noqa: BLE001 - every failure is recorded in the job, never lost
        if not isinstance(exc, IntegrateError):
            traceback.print_exc()
        jobs.finish(job_id, "failed", error=cli_message(exc), timings=timings)
        return 1
    jobs.finish(job_id, "succeeded", run_id=result.run_id, stage="done", stage_index=len(STAGES), timings=timings)
    return 0


def main(argv: list[str]) -> int:
    workspace, job_id, parent = argv[0], argv[1], int(argv[2])
    _die_with_parent(parent)
    try:  # the run is CPU-bound: the server's requests come first on a busy machine
        os.nice(WORKER_NICE)
    except OSError:
        pass
    logging.basicConfig(level=logging.WARNING, format="%(levelname)s: %(message)s")
    return run_job(workspace, job_id, incremental="incremental" in argv[3:], refit="refit" in argv[3:])


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
