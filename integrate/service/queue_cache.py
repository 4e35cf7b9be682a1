"""The review queue's state kept in memory, so a queue read is a few array reads, not a rebuild.

``queue_items`` (``review.queue``) rebuilds every pair's state from the whole decision table on each
call; under many reviewers that is most of the server's time. Here the standing decisions are read
once per output set and then followed through ``review_history``, which every decision, replacement
and undo appends to (from this server, another one or the terminal review alike): a read first
applies the history rows written since the last one (on SQLite, ids follow commit order, so
``id > last`` misses nothing; on other databases the whole decision table is read again each time).
The items are the same as ``queue_items`` gives for the possible-links queue (a test compares them).
"""

from __future__ import annotations

import json
import sqlite3
import threading
from typing import Any

import numpy as np
from sqlalchemy import select

from ..review.queue import ReviewData, _differs
from ..review.store import KEY_COLUMNS, DecisionStore, history_table

Key = tuple[str, str, str, str]
STATES = np.array(["open", "deferred", "decided"], dtype=object)


class QueueState:
    """The possible-links queue of one output set with each pair's state (0 open, 1 deferred, 2 decided)."""

    def __init__(self, data: ReviewData, store: DecisionStore) -> None:
        self.data, self.store = data, store
        queue = data.queue
        self.keys: list[Key] = list(queue[KEY_COLUMNS].itertuples(index=False, name=None))
        self.position = {k: i for i, k in enumerate(self.keys)}
        self.probability = queue["probability"].astype(float).tolist()
        self.codes = np.zeros(len(self.keys), np.int8)
        self._filters: dict[tuple[str | None, str | None], np.ndarray] = {}
        self._lock = threading.Lock()
        self._sqlite = store.engine.dialect.name == "sqlite" and store.engine.url.database not in (None, "", ":memory:")
        self._reader: sqlite3.Connection | None = None
        reasons = queue["reason"]
        self.possible_links = int((reasons == "possible link").sum())
        self.weakest_links = len(reasons) - self.possible_links
        self._last = -1
        self._reload()

    @property
    def reads_cheaply(self) -> bool:
        """A read follows the few history rows written since the last one (SQLite) instead of reading every
        decision again: cheap enough for the server's event loop."""
        return self._sqlite

    def _set(self, key: Key, decision: str | None) -> None:
        at = self.position.get(key)
        if at is not None:
            self.codes[at] = 0 if decision is None else (1 if decision == "defer" else 2)

    def _reload(self) -> None:
        with self.store.engine.connect() as conn:
            last = conn.execute(select(history_table.c.id).order_by(history_table.c.id.desc()).limit(1)).scalar()
        decided = self.store.decided()
        self.codes[:] = 0
        for key, decision in decided.items():
            self._set(key, decision)
        self._last = int(last or 0)

    def refresh(self) -> None:
        """Apply the decisions recorded since the last read (by anyone)."""
        with self._lock:
            if not self._sqlite:
                self._reload()
                return
            changes = self._history_since(self._last)
            for change_id, action, text in changes:
                row = json.loads(text)
                key = tuple(str(row[c]) for c in KEY_COLUMNS)
                self._set(key, None if action == "undo" else str(row["decision"]))  # type: ignore[arg-type]
                self._last = int(change_id)

    def _history_since(self, last: int) -> list[tuple[int, str, str]]:
        """History rows after ``last``, read on a plain connection of this cache's own: a read per queue
        request, so without the pool and statement building of the engine (a few microseconds, not hundreds)."""
        if self._reader is None:
            self._reader = sqlite3.connect(self.store.engine.url.database, timeout=30, check_same_thread=False)
        t = history_table
        cursor = self._reader.execute(f"SELECT {t.c.id.name}, {t.c.action.name}, {t.c.row.name} FROM {t.name} "
                                      f"WHERE {t.c.id.name} > ? ORDER BY {t.c.id.name}", (last,))
        return cursor.fetchall()

    def close(self) -> None:
        if self._reader is not None:
            self._reader.close()
            self._reader = None

    def __del__(self) -> None:
        self.close()

    def positions(self, source: str | None, field: str | None) -> np.ndarray:
        """Queue positions kept by the source and field filters (computed once per filter)."""
        cached = self._filters.get((source, field))
        if cached is not None:
            return cached
        queue = self.data.queue
        keep = np.ones(len(queue), bool)
        if source:
            keep &= ((queue["source_a"] == source) | (queue["source_b"] == source)).to_numpy()
        if field:
            keep &= _differs(queue, field, self.data.fields.get(field, "text")).to_numpy()
        found = np.flatnonzero(keep)
        if len(self._filters) < 256:
            self._filters[(source, field)] = found
        return found

    def page(self, source: str | None, field: str | None, offset: int, limit: int
             ) -> tuple[dict[str, int], list[dict[str, Any]]]:
        """The queue's progress and the items at ``offset`` (as ``queue_items`` rows)."""
        self.refresh()
        at = self.positions(source, field)
        codes = self.codes[at]
        decided, deferred = int(np.count_nonzero(codes == 2)), int(np.count_nonzero(codes == 1))
        progress = {"total": len(at), "decided": decided, "deferred": deferred, "remaining": len(at) - decided}
        items = []
        for i, code in zip(at[offset:offset + limit], codes[offset:offset + limit]):
            items.append({**dict(zip(KEY_COLUMNS, self.keys[i])), "probability": self.probability[i],
                          "state": STATES[code]})
        return progress, items
