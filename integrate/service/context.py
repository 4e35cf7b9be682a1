"""One served workspace: its name, its stores, its run jobs and its cached outputs."""

from __future__ import annotations

import re
import threading
from dataclasses import dataclass, field
from pathlib import Path

from ..review.queue import ReviewData, load_review_data
from ..review.store import DecisionStore
from ..state import StateStore, state_engine
from ..workspace import Workspace, load_workspace
from .decision_writer import DecisionWriter
from .jobs import JobRunner
from .queue_cache import QueueState
from .results import ResultsCache
from .store import TokenStore, full_sync


@dataclass
class WorkspaceContext:
    name: str
    root: Path
    tokens: TokenStore
    decisions: DecisionStore
    runs: StateStore
    jobs: JobRunner
    results: ResultsCache
    _review: tuple[object, ReviewData] | None = None
    _queue: tuple[object, QueueState] | None = None
    _lock: threading.Lock = field(default_factory=threading.Lock)
    _writer: DecisionWriter | None = None

    @classmethod
    def open(cls, name: str, root: Path) -> WorkspaceContext:
        load_workspace(root)  # a clear error now if this is not a workspace
        full_sync(state_engine(root))  # every acknowledged write survives a crash (see store.full_sync)
        return cls(name, root, TokenStore.for_workspace(root), DecisionStore.for_workspace(root),
                   StateStore.for_workspace(root), JobRunner(root), ResultsCache(root))

    @property
    def writer(self) -> DecisionWriter:
        """The thread that stores this workspace's decisions from the service (``decision_writer``)."""
        if self._writer is None:
            with self._lock:
                if self._writer is None:
                    self._writer = DecisionWriter(self.decisions)
        return self._writer

    def workspace(self) -> Workspace:
        return load_workspace(self.root)

    def warm(self) -> None:
        """Load the current outputs and review data now (a workspace without outputs yet is fine)."""
        try:
            self.results.get()
            self.queue_state()
        except Exception:  # noqa: BLE001 - a request will report the problem when it asks
            return

    def fresh_review_data(self) -> ReviewData | None:
        """The review data when it is known to be current without asking anything (cheap: for the event loop)."""
        stamp, cached = self.results.known_stamp(), self._review
        return cached[1] if stamp is not None and cached is not None and cached[0] == stamp else None

    def fresh_queue_state(self) -> QueueState | None:
        """The queue state when it is known to be current without asking anything (for the event loop)."""
        data, cached = self.fresh_review_data(), self._queue
        return cached[1] if data is not None and cached is not None and cached[0] is data else None

    def review_data(self) -> ReviewData:
        """The last run's pairs for reviewing, reloaded when a new output set appears."""
        _, stamp = self.results.stamp()
        cached = self._review
        if cached is not None and cached[0] == stamp:
            return cached[1]
        with self._lock:
            if self._review is None or self._review[0] != stamp:
                self._review = (stamp, load_review_data(self.root))
            return self._review[1]

    def queue_state(self) -> QueueState:
        """The possible-links queue with each pair's state, built once per output set (``queue_cache``)."""
        data = self.review_data()
        cached = self._queue
        if cached is not None and cached[0] is data:
            return cached[1]
        with self._lock:
            if self._queue is None or self._queue[0] is not data:
                self._queue = (data, QueueState(data, self.decisions))
            return self._queue[1]


def workspace_names(roots: list[Path]) -> list[str]:
    """A URL-safe name per workspace folder (its folder name; repeated names get -2, -3...)."""
    names: list[str] = []
    for root in roots:
        base = re.sub(r"[^A-Za-z0-9_.-]+", "-", root.resolve().name).strip("-.") or "workspace"
        name, n = base, 2
        while name in names:
            name, n = f"{base}-{n}", n + 1
        names.append(name)
    return names
