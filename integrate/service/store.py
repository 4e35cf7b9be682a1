"""The service's own tables in a workspace's state database: run jobs and access tokens.

They live on their own ``MetaData`` beside the run and review tables (``integrate.state``), so the
service adds tables without touching anyone else's:

- ``service_job``: one row per run started over HTTP: state (queued / running / succeeded /
  failed / cancelled), the stage it is in, per-stage timings, the error as the CLI prints it, the
  run number it produced, the worker's process ID and whether a cancel was asked for.
- ``service_token``: bearer tokens, stored as SHA-256 hashes only. A token is 32 random bytes
  (``secrets.token_urlsafe``), so a plain hash cannot be reversed by guessing; a slow password
  hash would only slow every request down.

Example:
    >>> import tempfile
    >>> tokens = TokenStore.for_workspace(tempfile.mkdtemp())
    >>> made = tokens.create("ana", "reviewer")
    >>> tokens.verify(made.secret).name, tokens.verify("itk_wrong")
    ('ana', None)
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import secrets
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from sqlalchemy import Column, Engine, Integer, MetaData, String, Table, Text, event, insert, select, update

from ..state import state_engine

ROLES = ("reader", "reviewer", "admin")  # each role may do everything the ones before it may
Role = Literal["reader", "reviewer", "admin"]
JOB_STATES = ("queued", "running", "succeeded", "failed", "cancelled")
ACTIVE_STATES = ("queued", "running")
TOKEN_PREFIX = "itk_"

metadata = MetaData()

job_table = Table(
    "service_job", metadata,
    Column("job_id", String(32), primary_key=True),
    Column("state", String(16), nullable=False),
    Column("stage", String(32)),
    Column("stage_index", Integer, nullable=False, default=0),
    Column("stages_total", Integer, nullable=False, default=0),
    Column("timings", Text),  # JSON: stage -> seconds
    Column("created_at", String(32), nullable=False),
    Column("started_at", String(32)),
    Column("finished_at", String(32)),
    Column("error", Text),
    Column("run_id", Integer),
    Column("pid", Integer),
    Column("cancel_requested", Integer, nullable=False, default=0),
    Column("requested_by", String(200)),
)

token_table = Table(
    "service_token", metadata,
    Column("token_id", Integer, primary_key=True, autoincrement=True),
    Column("name", String(200), nullable=False),
    Column("role", String(16), nullable=False),
    Column("hash", String(64), nullable=False, unique=True),
    Column("created_at", String(32), nullable=False),
    Column("revoked_at", String(32)),
)


def now_iso() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def full_sync(engine: Engine) -> Engine:
    """Make every new SQLite connection of ``engine`` sync its WAL on each commit (synchronous=FULL).

    In WAL mode SQLite's default (NORMAL) already survives a killed process, since a committed
    transaction is in the WAL file; FULL also survives the machine losing power, which is what
    "a decision acknowledged is a decision kept" needs. Pooled connections opened before are
    closed so that every connection from now on has the setting.
    """
    if engine.dialect.name != "sqlite" or event.contains(engine, "connect", _full_sync_pragma):
        return engine
    event.listen(engine, "connect", _full_sync_pragma)
    engine.dispose()
    return engine


def _full_sync_pragma(dbapi_connection: Any, _record: Any) -> None:
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA synchronous=FULL")
    cursor.close()


@dataclass(frozen=True)
class Token:
    token_id: int
    name: str
    role: Role
    created_at: str
    revoked_at: str | None = None
    secret: str | None = None  # only when just created: shown once, never stored

    def allows(self, role: Role) -> bool:
        return ROLES.index(self.role) >= ROLES.index(role)


def _hash(secret: str) -> str:
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


class TokenStore:
    """Bearer tokens of one workspace."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        metadata.create_all(engine)

    @classmethod
    def for_workspace(cls, workspace: str | Path) -> TokenStore:
        return cls(state_engine(workspace))

    def create(self, name: str, role: Role) -> Token:
        if role not in ROLES:
            raise ValueError(f"unknown role {role!r}")
        secret = TOKEN_PREFIX + secrets.token_urlsafe(32)
        created = now_iso()
        with self.engine.begin() as conn:
            token_id = int(conn.execute(insert(token_table).values(
                name=name, role=role, hash=_hash(secret), created_at=created)).inserted_primary_key[0])
        return Token(token_id, name, role, created, None, secret)

    def active(self) -> dict[str, Token]:
        """Every token not revoked, by the hash of its secret (one query for all)."""
        t = token_table
        with self.engine.connect() as conn:
            rows = conn.execute(select(t).where(t.c.revoked_at.is_(None))).mappings().all()
        return {r["hash"]: Token(r["token_id"], r["name"], r["role"], r["created_at"]) for r in rows}

    @staticmethod
    def hash_of(secret: str) -> str:
        return _hash(secret)

    def verify(self, secret: str) -> Token | None:
        """The token behind a secret, if it exists and is not revoked."""
        t = token_table
        with self.engine.connect() as conn:
            row = conn.execute(select(t).where(t.c.hash == _hash(secret), t.c.revoked_at.is_(None))).mappings().first()
        return None if row is None else Token(row["token_id"], row["name"], row["role"], row["created_at"])

    def revoke(self, token_id: int) -> bool:
        with self.engine.begin() as conn:
            return bool(conn.execute(update(token_table).where(
                token_table.c.token_id == token_id, token_table.c.revoked_at.is_(None)).values(
                revoked_at=now_iso())).rowcount)

    def list(self) -> list[Token]:
        with self.engine.connect() as conn:
            rows = conn.execute(select(token_table).order_by(token_table.c.token_id)).mappings().all()
        return [Token(r["token_id"], r["name"], r["role"], r["created_at"], r["revoked_at"]) for r in rows]

    def active_count(self) -> int:
        return sum(1 for t in self.list() if t.revoked_at is None)


class JobStore:
    """Run jobs of one workspace (rows of ``service_job``)."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        metadata.create_all(engine)

    @classmethod
    def for_workspace(cls, workspace: str | Path) -> JobStore:
        return cls(state_engine(workspace))

    def create(self, stages_total: int, requested_by: str | None) -> dict[str, Any]:
        """A new queued job, unless one is queued or running: then that one is returned with ``created=False``."""
        with self.engine.begin() as conn:
            # the write comes first, so two servers on one database are serialised here
            conn.execute(update(job_table).where(job_table.c.job_id == "").values(state="queued"))
            active = conn.execute(select(job_table).where(job_table.c.state.in_(ACTIVE_STATES))
                                  .order_by(job_table.c.created_at)).mappings().first()
            if active is not None:
                return {**self._row(dict(active)), "created": False}
            row = {"job_id": uuid.uuid4().hex, "state": "queued", "stage": None, "stage_index": 0,
                   "stages_total": stages_total, "timings": "{}", "created_at": now_iso(),
                   "cancel_requested": 0, "requested_by": requested_by}
            conn.execute(insert(job_table).values(**row))
        return {**self._row(row), "created": True}

    def update(self, job_id: str, **values: Any) -> None:
        if "timings" in values and not isinstance(values["timings"], str):
            values["timings"] = json.dumps(values["timings"], sort_keys=True)
        with self.engine.begin() as conn:
            conn.execute(update(job_table).where(job_table.c.job_id == job_id).values(**values))

    def finish(self, job_id: str, state: str, **values: Any) -> bool:
        """Move a job that is still active to a final state; False when it had finished already."""
        if "timings" in values and not isinstance(values["timings"], str):
            values["timings"] = json.dumps(values["timings"], sort_keys=True)
        with self.engine.begin() as conn:
            return bool(conn.execute(update(job_table).where(
                job_table.c.job_id == job_id, job_table.c.state.in_(ACTIVE_STATES)).values(
                state=state, finished_at=now_iso(), **values)).rowcount)

    def get(self, job_id: str) -> dict[str, Any] | None:
        with self.engine.connect() as conn:
            row = conn.execute(select(job_table).where(job_table.c.job_id == job_id)).mappings().first()
        return None if row is None else self._row(dict(row))

    def list(self, limit: int = 50) -> list[dict[str, Any]]:
        with self.engine.connect() as conn:
            rows = conn.execute(select(job_table).order_by(job_table.c.created_at.desc()).limit(limit)
                                ).mappings().all()
        return [self._row(dict(r)) for r in rows]

    def cancel_requested(self, job_id: str) -> bool:
        with self.engine.connect() as conn:
            row = conn.execute(select(job_table.c.cancel_requested).where(job_table.c.job_id == job_id)).first()
        return bool(row and row[0])

    def fail_abandoned(self, message: str) -> int:
        """Jobs left queued or running by a server that stopped: failed, never left running."""
        with self.engine.begin() as conn:
            return int(conn.execute(update(job_table).where(job_table.c.state.in_(ACTIVE_STATES)).values(
                state="failed", finished_at=now_iso(), error=message)).rowcount)

    @staticmethod
    def _row(row: dict[str, Any]) -> dict[str, Any]:
        row = dict(row)
        row["timings"] = json.loads(row.get("timings") or "{}")
        row["cancel_requested"] = bool(row.get("cancel_requested"))
        return row
