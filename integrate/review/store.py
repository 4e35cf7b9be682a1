"""Review decisions, stored durably in the workspace's state database (``integrate.state``:
SQLite by default, or the database ``INTEGRATE_STATE_URL`` names), in tables of their own.

One row per reviewed pair in ``review_decision`` (the pair's two ends in a fixed order, so a pair
has one key however it was shown), and every change appended to ``review_history``, so nothing a
reviewer did is ever lost. Each change is one transaction that begins with its write, so two
reviewers at once (two threads, two processes) are serialised by the database itself:

- a pair nobody decided gets the decision (INSERT; the unique key stops a duplicate);
- a pair the same reviewer decided, or anyone put off (``defer``), is replaced;
- a pair someone else decided ``same`` or ``different`` is not touched: ``DecisionConflict``
  carries the existing decision instead.

Example:
    >>> import tempfile
    >>> store = DecisionStore.for_workspace(tempfile.mkdtemp())
    >>> row = store.record(NewDecision(source_a="webshop", record_id_a="W1", source_b="events",
    ...                                record_id_b="7", decision="same", reviewer="ana"))
    >>> (row["source_a"], row["decision"], row["revision"])
    ('events', 'same', 1)
    >>> store.record(NewDecision(source_a="events", record_id_a="7", source_b="webshop",
    ...                          record_id_b="W1", decision="different", reviewer="bo"))
    Traceback (most recent call last):
    ...
    integrate.review.store.DecisionConflict: pair events/7 ~ webshop/W1 was already decided 'same' by ana
"""

from __future__ import annotations

import datetime as dt
import json
import os
import time
from pathlib import Path
from typing import Any, Literal

import pandas as pd
from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy import (
    Column,
    Engine,
    Float,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
    and_,
    bindparam,
    delete,
    func,
    insert,
    or_,
    select,
    tuple_,
    update,
)
from sqlalchemy.exc import IntegrityError

from ..errors import IntegrateError
from ..state import STATE_URL_ENV, state_database, state_engine

DECISIONS = ("same", "different", "defer")
DecisionKind = Literal["same", "different", "defer"]
KEY_COLUMNS = ["source_a", "record_id_a", "source_b", "record_id_b"]
DECISION_COLUMNS = KEY_COLUMNS + ["decision", "reviewer", "decided_at", "note"]
CLAIM_SECONDS = 300  # an item shown to one reviewer is kept from the others this long
_RETRIES = 8  # a decision races an undo at most this often before giving up

metadata = MetaData()



def _pair_columns() -> list[Column]:
    return [Column(c, String, nullable=False) for c in KEY_COLUMNS]


decision_table = Table(
    "review_decision", metadata,
    Column("id", Integer, primary_key=True, autoincrement=True),
    *_pair_columns(),
    Column("decision", String(16), nullable=False),
    Column("reviewer", String(200), nullable=False),
    Column("decided_at", String(32), nullable=False),  # ISO 8601, UTC
    Column("note", Text),
    Column("probability", Float),  # the match probability shown when deciding
    Column("weight", Float),  # the total weight (bits) shown when deciding
    Column("run_decision", String(16)),  # link / possible link / non-link at the time
    Column("scores", Text),  # JSON: agreement grade and weight per field at the time
    Column("origin", String(16), nullable=False, default="possible"),  # queue it came from: possible / audit / import
    Column("revision", Integer, nullable=False, default=1),
    UniqueConstraint(*KEY_COLUMNS, name="uq_review_decision_pair"),
)

history_table = Table(
    "review_history", metadata,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("decision_id", Integer, nullable=False),
    Column("action", String(16), nullable=False),  # decide / replace / undo
    Column("at", String(32), nullable=False),
    Column("row", Text, nullable=False),  # JSON of the decision row after (or, for undo, before)
)

claim_table = Table(
    "review_claim", metadata,
    Column("pair", String, primary_key=True),
    Column("reviewer", String(200), nullable=False),
    Column("until", Float, nullable=False),  # seconds since the epoch
)

audit_table = Table(
    "review_audit", metadata,
    Column("id", Integer, primary_key=True, autoincrement=True),
    *_pair_columns(),
    Column("drawn_at", String(32), nullable=False),
    Column("seed", Integer, nullable=False),
    Column("probability", Float),
    UniqueConstraint(*KEY_COLUMNS, name="uq_review_audit_pair"),
)


# a decision on a whole cluster: the pairwise decisions it stored, undone together
cluster_decision_table = Table(
    "review_cluster_decision", metadata,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("cluster_id", String, nullable=False),  # as the queue named it (entity IDs of that run)
    Column("choice", String(16), nullable=False),  # keep together / split
    Column("reviewer", String(200), nullable=False),
    Column("decided_at", String(32), nullable=False),
    Column("note", Text),
    Column("parts", Text, nullable=False),  # JSON: {"A": [[source, record ID], ...], "B": [...]}
)

cluster_member_table = Table(
    "review_cluster_member", metadata,
    Column("cluster_decision_id", Integer, primary_key=True),
    Column("decision_id", Integer, primary_key=True),
    Column("revision", Integer, nullable=False),  # the pair's decision as the cluster decision left it
)


class DecisionConflict(IntegrateError):
    """Someone else already decided this pair; ``existing`` is their decision."""

    def __init__(self, existing: dict[str, Any]) -> None:
        self.existing = existing
        who = existing.get("reviewer")
        super().__init__(f"pair {pair_label(existing)} was already decided '{existing.get('decision')}' by {who}")


class NothingToUndo(IntegrateError):
    """The decision to undo no longer exists."""


class NewDecision(BaseModel):
    """A decision as a reviewer sends it (from the page, the terminal or an imported file)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    source_a: str = Field(min_length=1)
    record_id_a: str = Field(min_length=1)
    source_b: str = Field(min_length=1)
    record_id_b: str = Field(min_length=1)
    decision: DecisionKind
    reviewer: str = Field(min_length=1, max_length=200)
    note: str | None = Field(None, max_length=4000)
    probability: float | None = None
    weight: float | None = None
    run_decision: str | None = None
    scores: dict[str, Any] | None = None
    origin: str = "possible"
    decided_at: str | None = None  # kept when importing; otherwise now


def ordered_pair(source_a: str, record_id_a: str, source_b: str, record_id_b: str) -> tuple[str, str, str, str]:
    """The pair's two ends in a fixed order, so (a, b) and (b, a) are one key."""
    if (source_b, record_id_b) < (source_a, record_id_a):
        return source_b, record_id_b, source_a, record_id_a
    return source_a, record_id_a, source_b, record_id_b


def order_pairs(frame: pd.DataFrame) -> pd.DataFrame:
    """``ordered_pair`` for a whole frame of pairs (columns KEY_COLUMNS), vectorised."""
    out = frame.copy()
    sa, ra = frame["source_a"].astype(str), frame["record_id_a"].astype(str)
    sb, rb = frame["source_b"].astype(str), frame["record_id_b"].astype(str)
    swap = ((sb < sa) | ((sb == sa) & (rb < ra))).to_numpy()
    out["source_a"], out["record_id_a"] = sa.where(~swap, sb), ra.where(~swap, rb)
    out["source_b"], out["record_id_b"] = sb.where(~swap, sa), rb.where(~swap, ra)
    return out


def pair_label(row: dict[str, Any]) -> str:
    return f"{row['source_a']}/{row['record_id_a']} ~ {row['source_b']}/{row['record_id_b']}"


def pair_text(key: tuple[str, str, str, str]) -> str:
    """One string per pair (for claims and for the page's item IDs)."""
    return "\x1f".join(key)


def now_iso() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="microseconds").replace("+00:00", "Z")


def has_state(workspace: str | Path) -> bool:
    """Whether the workspace has a state database yet (reading must not create one)."""
    return bool(os.environ.get(STATE_URL_ENV, "").strip()) or state_database(workspace).exists()


def _replace_statement() -> Any:
    """UPDATE of a whole decision row by id, its values as ``new_<column>`` parameters (for executemany)."""
    t = decision_table
    return update(t).where(t.c.id == bindparam("new_id")).values(
        {c.name: bindparam(f"new_{c.name}") for c in t.columns if c.name != "id"})


class DecisionStore:
    """Review decisions of one workspace, safe for several reviewers at once."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        metadata.create_all(engine)

    @classmethod
    def for_workspace(cls, workspace: str | Path) -> DecisionStore:
        return cls(state_engine(workspace))

    # -- deciding -----------------------------------------------------------------------------
    @staticmethod
    def _values(new: NewDecision) -> tuple[tuple[str, str, str, str], dict[str, Any]]:
        key = ordered_pair(new.source_a, new.record_id_a, new.source_b, new.record_id_b)
        return key, {
            **dict(zip(KEY_COLUMNS, key)), "decision": new.decision, "reviewer": new.reviewer,
            "decided_at": new.decided_at or now_iso(), "note": (new.note or None),
            "probability": new.probability, "weight": new.weight, "run_decision": new.run_decision,
            "scores": json.dumps(new.scores, sort_keys=True) if new.scores else None, "origin": new.origin,
        }

    def record_many(self, news: list[NewDecision]) -> list[dict[str, Any] | DecisionConflict]:
        """Store several decisions in ONE transaction (one commit, so one sync to disk for all).

        Each decision follows the rules of ``record`` in the order given (a later one in the list
        sees the earlier ones); the answer per decision is its stored row or the
        ``DecisionConflict`` ``record`` would raise. Nothing is stored if the transaction fails.
        On SQLite the transaction takes the write lock first, reads the batch's pairs in one query
        and writes only what changes (a conflict costs no statement); other databases take the
        decisions one transaction at a time (``record``).
        """
        if self.engine.dialect.name != "sqlite":
            out: list[dict[str, Any] | DecisionConflict] = []
            for new in news:
                try:
                    out.append(self.record(new))
                except DecisionConflict as conflict:
                    out.append(conflict)
            return out
        answers: list[dict[str, Any] | DecisionConflict] = []
        logged: list[tuple[dict[str, Any], str]] = []
        added: list[dict[str, Any]] = []
        replaced: list[dict[str, Any]] = []
        t = decision_table
        prepared = [self._values(new) for new in news]
        with self.engine.begin() as conn:
            # a write that changes nothing, first: the transaction holds the write lock before it reads
            conn.execute(update(t).where(t.c.id == -1).values(revision=t.c.revision))
            keys = sorted({key for key, _ in prepared})
            standing = {tuple(r[c] for c in KEY_COLUMNS): dict(r) for r in conn.execute(
                select(t).where(tuple_(*(t.c[c] for c in KEY_COLUMNS)).in_(keys))).mappings()}
            # ids as SQLite would give them one INSERT at a time (the table has no AUTOINCREMENT: the
            # largest id plus one), so that all new rows go in one statement
            last_id = int(conn.execute(select(func.max(t.c.id))).scalar() or 0)
            for new, (key, values) in zip(news, prepared):
                current = standing.get(key)
                if current is None:  # nobody decided the pair
                    last_id += 1
                    row, action = {**values, "id": last_id, "revision": 1}, "decide"
                    added.append(row)
                elif current["decision"] == "defer" or current["reviewer"] == new.reviewer:
                    row, action = {**current, **values, "revision": int(current["revision"]) + 1}, "replace"
                    replaced.append(row)
                else:
                    answers.append(DecisionConflict(dict(current)))
                    continue
                standing[key] = row
                logged.append((row, action))
                answers.append(row)
            if added:  # new rows first: a replacement in the same batch may be of one of them
                conn.execute(insert(t), added)
            if replaced:
                conn.execute(_replace_statement(), [{f"new_{k}": v for k, v in row.items()} for row in replaced])
            if logged:  # the history rows of the whole batch in one statement, in the order decided
                conn.execute(insert(history_table), [self._history_row(row, action) for row, action in logged])
        return answers

    def record(self, new: NewDecision) -> dict[str, Any]:
        """Store a decision in one transaction; returns the stored row.

        Raises:
            DecisionConflict: another reviewer already decided the pair ``same`` or ``different``.
        """
        key, values = self._values(new)
        where = self._where(key)
        for _ in range(_RETRIES):
            try:
                with self.engine.begin() as conn:
                    result = conn.execute(insert(decision_table).values(**values, revision=1))
                    row = {**values, "id": int(result.inserted_primary_key[0]), "revision": 1}
                    self._log(conn, row, "decide")
                    return row
            except IntegrityError:
                pass  # the pair has a decision already
            with self.engine.begin() as conn:
                # the write comes first, so the transaction holds the write lock before it reads
                changed = conn.execute(
                    update(decision_table)
                    .where(where, or_(decision_table.c.decision == "defer",
                                      decision_table.c.reviewer == new.reviewer))
                    .values(**values, revision=decision_table.c.revision + 1)
                ).rowcount
                current = conn.execute(select(decision_table).where(where)).mappings().first()
                if changed and current is not None:
                    row = dict(current)
                    self._log(conn, row, "replace")
                    return row
            if current is not None:
                raise DecisionConflict(dict(current))
            # undone between the two statements: try again from the start
        raise IntegrateError(f"could not store the decision on {pair_label(values)}: it kept changing")

    def undo(self, decision_id: int, reviewer: str) -> dict[str, Any]:
        """Remove one of the reviewer's own decisions (their last one, as the page tracks it).

        Raises:
            NothingToUndo: the decision is gone already.
            DecisionConflict: the pair's decision is now someone else's.
        """
        with self.engine.begin() as conn:
            row = conn.execute(select(decision_table).where(decision_table.c.id == decision_id)).mappings().first()
            if row is None:
                raise NothingToUndo(f"decision {decision_id} does not exist (already undone?)")
            row = dict(row)
            gone = conn.execute(delete(decision_table).where(
                decision_table.c.id == decision_id, decision_table.c.reviewer == reviewer,
                decision_table.c.revision == row["revision"])).rowcount
            if not gone:
                raise DecisionConflict(row)
            self._log(conn, row, "undo")
        return row

    def record_cluster(self, cluster_id: str, choice: str, parts: dict[str, list[tuple[str, str]]],
                       decisions: list[NewDecision]) -> dict[str, Any]:
        """Store a decision on a whole cluster as its pairwise ``decisions``, all in one transaction.

        A pair that already holds the same decision is left as it is (and is not undone with the
        cluster); the reviewer's own or a deferred decision is replaced; nothing is stored if any
        pair was decided otherwise by someone else. Returns the cluster decision with its ``decisions``.

        Raises:
            DecisionConflict: another reviewer decided one of the pairs otherwise.
        """
        if not decisions:
            raise IntegrateError(f"a decision on cluster {cluster_id} needs at least one pair")
        reviewer = decisions[0].reviewer
        for _ in range(_RETRIES):
            try:
                with self.engine.begin() as conn:
                    # the write comes first, so the transaction holds the write lock before it reads
                    group = {"cluster_id": cluster_id, "choice": choice, "reviewer": reviewer,
                             "decided_at": now_iso(), "note": decisions[0].note or None,
                             "parts": json.dumps(parts, sort_keys=True)}
                    group_id = int(conn.execute(insert(cluster_decision_table).values(**group))
                                   .inserted_primary_key[0])
                    rows = [r for r in (self._record_in(conn, new, group_id) for new in decisions) if r]
                    return {**group, "parts": parts, "id": group_id, "decisions": rows}
            except IntegrityError:
                continue  # another reviewer decided one of the pairs meanwhile: look again
        raise IntegrateError(f"could not store the decision on cluster {cluster_id}: its pairs kept changing")

    def _record_in(self, conn: Any, new: NewDecision, group_id: int) -> dict[str, Any] | None:
        """One pair of a cluster decision inside the caller's transaction (None: it stood already)."""
        key = ordered_pair(new.source_a, new.record_id_a, new.source_b, new.record_id_b)
        values = {
            **dict(zip(KEY_COLUMNS, key)), "decision": new.decision, "reviewer": new.reviewer,
            "decided_at": new.decided_at or now_iso(), "note": (new.note or None),
            "probability": new.probability, "weight": new.weight, "run_decision": new.run_decision,
            "scores": json.dumps(new.scores, sort_keys=True) if new.scores else None, "origin": new.origin,
        }
        current = conn.execute(select(decision_table).where(self._where(key))).mappings().first()
        if current is None:
            result = conn.execute(insert(decision_table).values(**values, revision=1))
            row = {**values, "id": int(result.inserted_primary_key[0]), "revision": 1}
            action = "decide"
        elif current["decision"] == new.decision:
            return None
        elif current["decision"] == "defer" or current["reviewer"] == new.reviewer:
            conn.execute(update(decision_table).where(decision_table.c.id == current["id"])
                         .values(**values, revision=current["revision"] + 1))
            row = {**dict(current), **values, "revision": current["revision"] + 1}
            action = "replace"
        else:
            raise DecisionConflict(dict(current))  # leaving the block rolls every pair back
        conn.execute(insert(cluster_member_table).values(cluster_decision_id=group_id, decision_id=row["id"],
                                                         revision=row["revision"]))
        self._log(conn, row, action)
        return row

    def undo_cluster(self, cluster_decision_id: int, reviewer: str) -> dict[str, Any]:
        """Remove a whole cluster decision: each pair it decided, unless decided again since.

        Raises:
            NothingToUndo: the cluster decision is gone already.
            DecisionConflict: it is someone else's (``existing`` is the cluster decision).
        """
        t, m = cluster_decision_table, cluster_member_table
        with self.engine.begin() as conn:
            group = conn.execute(select(t).where(t.c.id == cluster_decision_id)).mappings().first()
            if group is None:
                raise NothingToUndo(f"cluster decision {cluster_decision_id} does not exist (already undone?)")
            group = {**group, "parts": json.loads(group["parts"])}
            if group["reviewer"] != reviewer:
                raise DecisionConflict({**group, "decision": group["choice"], "source_a": group["cluster_id"],
                                        "record_id_a": "", "source_b": "", "record_id_b": ""})
            members = conn.execute(select(m).where(m.c.cluster_decision_id == cluster_decision_id)).all()
            undone = []
            for _, decision_id, revision in members:
                row = conn.execute(select(decision_table).where(
                    decision_table.c.id == decision_id, decision_table.c.revision == revision)).mappings().first()
                if row is None:
                    continue  # undone or decided again since: that later decision stands
                conn.execute(delete(decision_table).where(decision_table.c.id == decision_id))
                self._log(conn, dict(row), "undo")
                undone.append(dict(row))
            conn.execute(delete(m).where(m.c.cluster_decision_id == cluster_decision_id))
            conn.execute(delete(t).where(t.c.id == cluster_decision_id))
        return {**group, "decisions": undone}

    def cluster_decision_of(self, decision_id: int) -> int | None:
        """The cluster decision a pair's decision belongs to, if any (and it still stands as it left it)."""
        m = cluster_member_table
        with self.engine.connect() as conn:
            row = conn.execute(select(m.c.cluster_decision_id).join(
                decision_table, and_(decision_table.c.id == m.c.decision_id,
                                     decision_table.c.revision == m.c.revision))
                .where(m.c.decision_id == decision_id)).first()
        return int(row[0]) if row else None

    def cluster_decisions(self, cluster_id: str | None = None) -> list[dict[str, Any]]:
        """Standing cluster decisions (of one cluster, or all), oldest first."""
        t = cluster_decision_table
        query = select(t).order_by(t.c.id)
        if cluster_id is not None:
            query = query.where(t.c.cluster_id == cluster_id)
        with self.engine.connect() as conn:
            return [{**r, "parts": json.loads(r["parts"])} for r in conn.execute(query).mappings().all()]

    def last_cluster_decision_of(self, reviewer: str) -> dict[str, Any] | None:
        """The reviewer's most recent cluster decision that still stands."""
        t = cluster_decision_table
        with self.engine.connect() as conn:
            row = conn.execute(select(t).where(t.c.reviewer == reviewer).order_by(t.c.id.desc())).mappings().first()
        return {**row, "parts": json.loads(row["parts"])} if row else None

    def get(self, key: tuple[str, str, str, str]) -> dict[str, Any] | None:
        """The standing decision on a pair (ends in any order), if any."""
        with self.engine.connect() as conn:
            row = conn.execute(select(decision_table).where(self._where(ordered_pair(*key)))).mappings().first()
        return dict(row) if row else None

    def decisions_on(self, keys: list[tuple[str, str, str, str]]) -> dict[tuple[str, str, str, str], dict[str, Any]]:
        """The standing decisions on these pairs (ends in the store's order), by pair, in few queries."""
        t = decision_table
        found: dict[tuple[str, str, str, str], dict[str, Any]] = {}
        with self.engine.connect() as conn:
            for start in range(0, len(keys), 400):  # bound the statement's size
                chunk = keys[start:start + 400]
                rows = conn.execute(select(t).where(tuple_(*[t.c[c] for c in KEY_COLUMNS]).in_(chunk))).mappings()
                found.update({tuple(r[c] for c in KEY_COLUMNS): dict(r) for r in rows})  # type: ignore[misc]
        return found

    def last_decision_of(self, reviewer: str) -> dict[str, Any] | None:
        """The reviewer's most recent decision that still stands."""
        with self.engine.connect() as conn:
            row = conn.execute(select(decision_table).where(decision_table.c.reviewer == reviewer)
                               .order_by(decision_table.c.decided_at.desc(), decision_table.c.id.desc())
                               ).mappings().first()
        return dict(row) if row else None

    # -- reading ------------------------------------------------------------------------------
    def decisions(self) -> pd.DataFrame:
        """Every standing decision, oldest first (all columns of ``review_decision``)."""
        with self.engine.connect() as conn:
            rows = conn.execute(select(decision_table).order_by(decision_table.c.id)).mappings().all()
        columns = [c.name for c in decision_table.columns]
        return pd.DataFrame([dict(r) for r in rows], columns=columns)

    def decided(self) -> dict[tuple[str, str, str, str], str]:
        """Pair key -> decision, for building the queue."""
        t = decision_table
        with self.engine.connect() as conn:
            rows = conn.execute(select(t.c.source_a, t.c.record_id_a, t.c.source_b, t.c.record_id_b,
                                       t.c.decision)).all()
        return {(r[0], r[1], r[2], r[3]): r[4] for r in rows}

    def history(self) -> pd.DataFrame:
        with self.engine.connect() as conn:
            rows = conn.execute(select(history_table).order_by(history_table.c.id)).mappings().all()
        return pd.DataFrame([dict(r) for r in rows], columns=[c.name for c in history_table.columns])

    # -- claims: an item shown to one reviewer is skipped for the others for a while -------------
    def claim(self, key: tuple[str, str, str, str], reviewer: str, seconds: float = CLAIM_SECONDS) -> bool:
        """Hold a pair for a reviewer unless someone else holds it; True when it is theirs now."""
        now = time.time()
        text = pair_text(key)
        with self.engine.begin() as conn:
            if conn.execute(update(claim_table).where(
                    claim_table.c.pair == text, or_(claim_table.c.reviewer == reviewer, claim_table.c.until <= now))
                    .values(reviewer=reviewer, until=now + seconds)).rowcount:
                return True
        try:
            with self.engine.begin() as conn:
                conn.execute(insert(claim_table).values(pair=text, reviewer=reviewer, until=now + seconds))
            return True
        except IntegrityError:
            return False  # someone else holds it

    def claimed_by_others(self, reviewer: str) -> set[str]:
        with self.engine.connect() as conn:
            rows = conn.execute(select(claim_table.c.pair).where(
                claim_table.c.reviewer != reviewer, claim_table.c.until > time.time())).all()
        return {r[0] for r in rows}

    # -- audit samples of automatic links ---------------------------------------------------------
    def add_audit_sample(self, pairs: pd.DataFrame, seed: int) -> int:
        """Remember sampled auto-links (columns KEY_COLUMNS + probability); returns how many were new."""
        drawn_at = now_iso()
        added = 0
        with self.engine.begin() as conn:
            for row in pairs.to_dict("records"):  # a sample is small (tens to hundreds of pairs)
                key = ordered_pair(row["source_a"], row["record_id_a"], row["source_b"], row["record_id_b"])
                if conn.execute(select(audit_table.c.id).where(self._where(key, audit_table))).first():
                    continue
                conn.execute(insert(audit_table).values(**dict(zip(KEY_COLUMNS, key)), drawn_at=drawn_at,
                                                        seed=seed, probability=row.get("probability")))
                added += 1
        return added

    def audit_sample(self) -> pd.DataFrame:
        with self.engine.connect() as conn:
            rows = conn.execute(select(audit_table).order_by(audit_table.c.id)).mappings().all()
        return pd.DataFrame([dict(r) for r in rows], columns=[c.name for c in audit_table.columns])

    # -- helpers ------------------------------------------------------------------------------
    @staticmethod
    def _where(key: tuple[str, str, str, str], table: Table = decision_table) -> Any:
        return and_(*[table.c[c] == v for c, v in zip(KEY_COLUMNS, key)])

    @staticmethod
    def _history_row(row: dict[str, Any], action: str) -> dict[str, Any]:
        return {"decision_id": row["id"], "action": action, "at": now_iso(),
                "row": json.dumps(row, sort_keys=True, default=str)}

    @classmethod
    def _log(cls, conn: Any, row: dict[str, Any], action: str) -> None:
        conn.execute(insert(history_table).values(**cls._history_row(row, action)))


def load_decisions(workspace: str | Path) -> pd.DataFrame:
    """All standing decisions of a workspace (empty when it has no state database yet).

    Returns:
        a frame with columns source_a, record_id_a, source_b, record_id_b, decision, reviewer,
        decided_at, note (the pair's ends in the store's fixed order).
    """
    if not has_state(workspace):
        return pd.DataFrame({c: pd.Series(dtype="string") for c in DECISION_COLUMNS})
    frame = DecisionStore.for_workspace(workspace).decisions()
    return frame[DECISION_COLUMNS].astype("string").reset_index(drop=True)
