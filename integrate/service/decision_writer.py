"""Decisions from many reviewers at once, stored by one writer thread in shared transactions.

Every decision must be on disk before it is acknowledged (the store syncs each commit), and a
sync costs milliseconds whatever it carries. With one transaction per request, concurrent
decisions queue for the database's write lock one sync at a time (and SQLite's busy wait sleeps
between tries). Here the requests hand their decisions to one thread; while a commit is under
way the next decisions gather, and the thread stores everything waiting in one transaction
(``DecisionStore.record_many``): one sync for the lot, each request answered only after the
commit that holds its decision (group commit). A failed transaction fails every request in it;
none of them is acknowledged.
"""

from __future__ import annotations

import queue
import threading
from concurrent.futures import Future
from typing import Any

from ..review.store import DecisionStore, NewDecision

BATCH = 64  # decisions at most in one transaction


class DecisionWriter:
    """The one thread that stores a workspace's decisions from the service."""

    def __init__(self, store: DecisionStore) -> None:
        self.store = store
        self._waiting: queue.SimpleQueue[tuple[NewDecision, Future[Any]]] = queue.SimpleQueue()
        self._thread: threading.Thread | None = None
        self._start = threading.Lock()

    def submit(self, new: NewDecision) -> Future[Any]:
        """A future that becomes the stored row, or raises ``DecisionConflict`` (or the store's error)."""
        done: Future[Any] = Future()
        self._waiting.put((new, done))
        if self._thread is None:
            with self._start:
                if self._thread is None:
                    self._thread = threading.Thread(target=self._loop, name="decision-writer", daemon=True)
                    self._thread.start()
        return done

    def _loop(self) -> None:
        while True:
            batch = [self._waiting.get()]
            while len(batch) < BATCH:
                try:
                    batch.append(self._waiting.get_nowait())
                except queue.Empty:
                    break
            try:
                answers = self.store.record_many([new for new, _ in batch])
            except Exception as exc:  # noqa: BLE001 - every waiting request gets the failure
                for _, done in batch:
                    done.set_exception(exc)
                continue
            for (_, done), answer in zip(batch, answers):
                if isinstance(answer, Exception):
                    done.set_exception(answer)
                else:
                    done.set_result(answer)
