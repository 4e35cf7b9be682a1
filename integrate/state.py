"""The state store: every run with its time, file hashes, the crosswalk it produced and what changed.

By default a SQLite file, ``WORKSPACE/.integrate/state.sqlite``. The environment variable
``INTEGRATE_STATE_URL`` (a SQLAlchemy URL, e.g. ``postgresql+psycopg://user@host/integrate``)
puts it in another database; the database's driver must be installed.

Tables (all prefixed ``run``): ``run`` (one row per run: times, counts, output folder, change
summary as JSON), ``run_file`` (SHA-256 of every mapping and input file the run read),
``run_crosswalk`` (the crosswalk: source, record ID, entity ID, a hash of the record's values)
and ``run_change`` (per entity, what changed against the previous run). A run is written in one
transaction, so a failed write leaves no partial run behind.

Other modules keep their own tables in the same database: they get the engine from
``state_engine(workspace)`` and create their tables on it (on ``metadata`` here or on their own
``MetaData``).

Example:
    >>> import tempfile, pandas as pd
    >>> store = StateStore.for_workspace(tempfile.mkdtemp())
    >>> crosswalk = pd.DataFrame({"source": ["a"], "record_id": ["1"], "entity_id": ["E1"]})
    >>> run_id = store.record_run(NewRun(started_at="2026-01-01T00:00:00Z", crosswalk=crosswalk))
    >>> store.last_run().run_id == run_id, store.crosswalk(run_id)["entity_id"].tolist()
    (True, ['E1'])
"""

from __future__ import annotations

import datetime as dt
import json
import os
import socket
import threading
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
from sqlalchemy import (
    Column,
    Engine,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    create_engine,
    delete,
    event,
    func,
    insert,
    select,
    text,
    update,
)
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, SQLAlchemyError

from . import migrations
from .errors import ConfigError, IntegrateError, missing_driver_error
from .killpoints import reached
from .mapping.load import file_hash
from .workspace import Workspace

STATE_URL_ENV = "INTEGRATE_STATE_URL"  # SQLAlchemy URL of the state database (default: SQLite file)
STATE_DIR = ".integrate"
STATE_FILE = "state.sqlite"
_INSERT_CHUNK = 5000  # rows per INSERT batch (keeps SQLite's bound-parameter count small)

metadata = MetaData()

run_table = Table(
    "run", metadata,
    Column("run_id", Integer, primary_key=True, autoincrement=True),
    Column("started_at", String(32), nullable=False),  # ISO 8601, UTC
    Column("finished_at", String(32), nullable=False),
    Column("records", Integer, nullable=False),
    Column("entities", Integer, nullable=False),
    Column("output_dir", Text),
    Column("report", Text),
    Column("summary", Text),  # JSON: the change summary against the previous run
)
run_file_table = Table(
    "run_file", metadata,
    Column("run_id", Integer, ForeignKey("run.run_id"), nullable=False),
    Column("kind", String(16), nullable=False),  # mapping / input
    Column("path", Text, nullable=False),
    Column("sha256", String(64)),  # empty for a database source read by URL
)
run_crosswalk_table = Table(
    "run_crosswalk", metadata,
    Column("run_id", Integer, ForeignKey("run.run_id"), primary_key=True),
    Column("source", String(200), primary_key=True),
    Column("record_id", String(200), primary_key=True),
    Column("entity_id", String(32), nullable=False),
    Column("record_hash", String(16)),
    Index("ix_run_crosswalk_entity", "entity_id"),
)
run_change_table = Table(
    "run_change", metadata,
    Column("run_id", Integer, ForeignKey("run.run_id"), nullable=False),
    Column("entity_id", String(32), nullable=False),
    Column("change", String(16), nullable=False),
    Column("related_ids", Text),
    Column("records", Integer),
    Column("records_added", Integer),
    Column("records_removed", Integer),
)

run_lock_table = Table(
    "run_lock", metadata,
    Column("lock_id", Integer, primary_key=True),  # always 1: one run at a time per state store
    Column("token", String(32), nullable=False),  # the holder's own random token
    Column("pid", Integer, nullable=False),
    Column("host", String(255), nullable=False),
    Column("started_at", String(32), nullable=False),
    Column("heartbeat", Float, nullable=False),  # Unix time of the holder's last sign of life
)

CROSSWALK_COLUMNS = ["source", "record_id", "entity_id", "record_hash"]
CHANGE_TABLE_COLUMNS = ["entity_id", "change", "related_ids", "records", "records_added", "records_removed"]


class StateError(IntegrateError):
    """The state database cannot be opened, read or written."""


def now_iso() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


def state_database(workspace: str | Path) -> Path:
    """Where the default SQLite state file of a workspace lives."""
    return Path(workspace) / STATE_DIR / STATE_FILE


def state_url(workspace: str | Path) -> str:
    """The state database's URL: ``INTEGRATE_STATE_URL`` if set, else the workspace's SQLite file."""
    url = os.environ.get(STATE_URL_ENV, "").strip()
    return url or f"sqlite:///{state_database(workspace).resolve()}"


def shown_url(url: str) -> str:
    """A URL fit for messages (password hidden)."""
    try:
        return make_url(url).render_as_string(hide_password=True)
    except ArgumentError:
        return url


_ENGINES: dict[str, Engine] = {}


def state_engine(workspace: str | Path) -> Engine:
    """The (shared, cached) engine of a workspace's state database, its schema upgraded to the newest.

    Raises:
        StateError: the database cannot be reached or upgraded.
        ConfigError: ``INTEGRATE_STATE_URL`` is not a usable SQLAlchemy URL (or its driver is missing).
    """
    url = state_url(workspace)
    if url in _ENGINES:
        return _ENGINES[url]
    try:
        parsed = make_url(url)
        if parsed.get_backend_name() == "sqlite" and parsed.database:
            Path(parsed.database).parent.mkdir(parents=True, exist_ok=True)
            engine = create_engine(url, connect_args={"timeout": 30})

            @event.listens_for(engine, "connect")
            def _pragmas(dbapi_connection: Any, _record: Any) -> None:
                cursor = dbapi_connection.cursor()
                cursor.execute("PRAGMA journal_mode=WAL")  # readers do not wait for a writing run
                cursor.execute("PRAGMA foreign_keys=ON")
                # a committed run survives power loss, not only a killed process (WAL's default,
                # NORMAL, may lose the last commits when the machine stops)
                cursor.execute("PRAGMA synchronous=FULL")
                cursor.close()
        else:  # a server: a pooled connection it closed meanwhile (restart, idle timeout) is replaced, not used
            engine = create_engine(url, pool_pre_ping=True)
    except ImportError as exc:  # the dialect exists but its driver package is not installed
        raise missing_driver_error(shown_url(url), exc) from exc
    except ArgumentError as exc:  # also a missing driver (NoSuchModuleError)
        raise ConfigError(f"{STATE_URL_ENV}={shown_url(url)!r} is not a usable SQLAlchemy URL: {exc} "
                          "(e.g. sqlite:///path/state.sqlite or postgresql+psycopg://user@host/db; "
                          "the database's driver must be installed)") from exc
    try:
        migrations.upgrade(engine)  # an older store is brought to the newest schema in place
    except (SQLAlchemyError, migrations.NewerSchema) as exc:
        engine.dispose()
        raise StateError(f"state database {shown_url(url)} cannot be used: {exc}") from exc
    _ENGINES[url] = engine
    return engine


@dataclass(frozen=True)
class RunRecord:
    """One stored run."""

    run_id: int
    started_at: str
    finished_at: str
    records: int
    entities: int
    output_dir: str | None
    report: str | None
    summary: dict[str, Any]


@dataclass
class NewRun:
    """What a run hands to the store."""

    started_at: str
    crosswalk: pd.DataFrame  # source, record_id, entity_id (+ record_hash)
    mapping_hashes: dict[str, str] = field(default_factory=dict)
    input_hashes: dict[str, str | None] = field(default_factory=dict)
    summary: dict[str, Any] = field(default_factory=dict)
    changes: pd.DataFrame | None = None
    output_dir: str | None = None
    report: str | None = None
    run_id: int | None = None  # the number reserved with ``next_run_id`` (under the run lock)


def create_tables(engine: Engine, tables_of: Any, tables: list | None = None) -> None:
    """Create missing tables. Two processes opening a new store at once can both find a table
    missing and both create it; the loser's "already exists" means the table is there, so the
    check is made again (a few times) instead of failing the run."""
    for attempt in range(5):
        try:
            tables_of.create_all(engine, tables=tables)
            return
        except SQLAlchemyError as exc:
            if "already exists" in str(exc) and attempt < 4:
                continue
            raise StateError(f"state database {shown_url(str(engine.url))} cannot be used: {exc}") from exc


class StateStore:
    """Runs of one workspace (see the module docstring)."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        create_tables(engine, metadata)

    @classmethod
    def for_workspace(cls, workspace: str | Path) -> StateStore:
        return cls(state_engine(workspace))

    @classmethod
    def existing(cls, workspace: str | Path) -> StateStore | None:
        """The store if it exists already (a default SQLite file is not created just to read it)."""
        if not os.environ.get(STATE_URL_ENV, "").strip() and not state_database(workspace).exists():
            return None
        return cls.for_workspace(workspace)

    def record_run(self, run: NewRun) -> int:
        """Store a run, its files, crosswalk and changes in one transaction; returns its number."""
        crosswalk = run.crosswalk.reindex(columns=CROSSWALK_COLUMNS)
        try:
            with self.engine.begin() as conn:
                numbered = {} if run.run_id is None else {"run_id": int(run.run_id)}
                run_id = int(conn.execute(insert(run_table).values(
                    **numbered, started_at=run.started_at, finished_at=now_iso(), records=len(crosswalk),
                    entities=int(run.crosswalk["entity_id"].nunique()), output_dir=run.output_dir,
                    report=run.report, summary=json.dumps(run.summary, sort_keys=True),
                )).inserted_primary_key[0])
                if numbered and conn.dialect.name == "postgresql":
                    # An explicit number does not advance PostgreSQL's serial counter; move it on so a
                    # later run recorded without a reserved number does not collide with this one.
                    conn.execute(text("SELECT setval(pg_get_serial_sequence('run', 'run_id'), "
                                      "(SELECT MAX(run_id) FROM run))"))
                files = [{"run_id": run_id, "kind": "mapping", "path": p, "sha256": h}
                         for p, h in sorted(run.mapping_hashes.items())]
                files += [{"run_id": run_id, "kind": "input", "path": p, "sha256": h}
                          for p, h in sorted(run.input_hashes.items())]
                reached("state:run")
                if files:
                    conn.execute(insert(run_file_table), files)
                self._insert(conn, run_crosswalk_table, crosswalk.assign(run_id=run_id))
                reached("state:crosswalk")
                if run.changes is not None and len(run.changes):
                    changes = run.changes.reindex(columns=CHANGE_TABLE_COLUMNS).assign(run_id=run_id)
                    self._insert(conn, run_change_table, changes)
        except SQLAlchemyError as exc:
            raise StateError(f"could not record the run in {shown_url(str(self.engine.url))}: {exc}") from exc
        reached("state:commit")
        return run_id

    def next_run_id(self) -> int:
        """The number the next recorded run gets (reserve it only while holding the run lock)."""
        rows = self._read(select(func.max(run_table.c.run_id).label("last")))
        return int(rows[0]["last"] or 0) + 1

    @staticmethod
    def _insert(conn: Any, table: Table, frame: pd.DataFrame) -> None:
        """Insert a frame's rows (missing values as NULL) in batches of ``_INSERT_CHUNK``.

        The rows go to the driver's ``executemany`` as plain tuples or dicts: SQLAlchemy's own
        executemany builds a parameter set per row in Python, most of recording a large crosswalk.
        A column whose type converts values on the way in (none does today) keeps that path.
        """
        columns = [str(c) for c in frame.columns]
        values = [frame[c].astype(object).where(frame[c].notna(), None).tolist() for c in frame.columns]
        rows = list(zip(*values, strict=True)) if values else []
        compiled = insert(table).compile(dialect=conn.dialect, column_keys=columns)
        plain = (set(compiled.params) == set(columns)
                 and all(table.c[c].type.bind_processor(conn.dialect) is None for c in columns))
        if plain and compiled.positional:
            order = [columns.index(name) for name in compiled.positiontup]
            params: list[Any] = [tuple(row[i] for i in order) for row in rows]
        else:
            params = [dict(zip(columns, row, strict=True)) for row in rows]
        for start in range(0, len(params), _INSERT_CHUNK):
            if plain:
                conn.exec_driver_sql(str(compiled), params[start:start + _INSERT_CHUNK])
            else:
                conn.execute(insert(table), params[start:start + _INSERT_CHUNK])

    def _read(self, statement: Any) -> list[dict[str, Any]]:
        try:
            with self.engine.connect() as conn:
                return [dict(r) for r in conn.execute(statement).mappings().all()]
        except SQLAlchemyError as exc:
            raise StateError(f"could not read {shown_url(str(self.engine.url))}: {exc}") from exc

    def runs(self) -> list[RunRecord]:
        """Every stored run, oldest first."""
        return [self._record(r) for r in self._read(select(run_table).order_by(run_table.c.run_id))]

    def last_run(self) -> RunRecord | None:
        rows = self._read(select(run_table).order_by(run_table.c.run_id.desc()).limit(1))
        return self._record(rows[0]) if rows else None

    def run(self, run_id: int) -> RunRecord | None:
        rows = self._read(select(run_table).where(run_table.c.run_id == run_id))
        return self._record(rows[0]) if rows else None

    @staticmethod
    def _record(row: dict[str, Any]) -> RunRecord:
        return RunRecord(row["run_id"], row["started_at"], row["finished_at"], row["records"], row["entities"],
                         row["output_dir"], row["report"], json.loads(row["summary"] or "{}"))

    def files(self, run_id: int) -> pd.DataFrame:
        t = run_file_table
        rows = self._read(select(t.c.kind, t.c.path, t.c.sha256).where(t.c.run_id == run_id)
                          .order_by(t.c.kind, t.c.path))
        return pd.DataFrame(rows, columns=["kind", "path", "sha256"])

    def crosswalk(self, run_id: int) -> pd.DataFrame:
        """The crosswalk a run produced (source, record_id, entity_id, record_hash)."""
        t = run_crosswalk_table
        rows = self._read(select(t.c.source, t.c.record_id, t.c.entity_id, t.c.record_hash)
                          .where(t.c.run_id == run_id).order_by(t.c.source, t.c.record_id))
        return pd.DataFrame(rows, columns=CROSSWALK_COLUMNS)

    def changes(self, run_id: int) -> pd.DataFrame:
        """Per entity, what changed in a run against the run before it."""
        t = run_change_table
        rows = self._read(select(*[t.c[c] for c in CHANGE_TABLE_COLUMNS]).where(t.c.run_id == run_id)
                          .order_by(t.c.change, t.c.entity_id))
        return pd.DataFrame(rows, columns=CHANGE_TABLE_COLUMNS)

    def issued_ids(self) -> set[str]:
        """Every entity ID any stored run has issued."""
        t = run_crosswalk_table
        return {r["entity_id"] for r in self._read(select(t.c.entity_id).distinct())}

    def entity_history(self, entity_id: str) -> pd.DataFrame:
        """The runs in which an entity ID appears, with its number of records in each."""
        t = run_crosswalk_table
        rows = self._read(select(t.c.run_id, func.count().label("records")).where(t.c.entity_id == entity_id)
                          .group_by(t.c.run_id).order_by(t.c.run_id))
        return pd.DataFrame(rows, columns=["run_id", "records"])


def input_hashes(workspace: Workspace) -> dict[str, str | None]:
    """SHA-256 of every source's data file (a database read by URL gets its URL and no hash)."""
    out: dict[str, str | None] = {}
    for entry in workspace.sources:
        path = entry.data_path(workspace.root)
        if path is None:
            out[shown_url(str(entry.mapping.read.url))] = None
        elif path.is_file():
            out[workspace.display(path)] = file_hash(path)
    return out


@dataclass
class RunHistory:
    """What a new run needs from the store: the previous run, its crosswalk, every ID issued so far."""

    store: StateStore | None
    previous: RunRecord | None
    previous_crosswalk: pd.DataFrame | None
    issued: set[str]

    @classmethod
    def load(cls, workspace: str | Path, *, create: bool = True) -> RunHistory:
        """Read the history; with ``create=False`` a missing default SQLite file is not created."""
        store = StateStore.for_workspace(workspace) if create else StateStore.existing(workspace)
        previous = store.last_run() if store is not None else None
        crosswalk = store.crosswalk(previous.run_id) if store is not None and previous is not None else None
        issued = store.issued_ids() if store is not None else set()
        return cls(store, previous, crosswalk, issued)

    @property
    def previous_run_id(self) -> int | None:
        return None if self.previous is None else self.previous.run_id


LOCK_STALE_SECONDS = 60.0  # a holder silent this long is taken to be dead, on any host
HEARTBEAT_SECONDS = 5.0


class RunLocked(IntegrateError):
    """Another run holds this workspace's run lock."""


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # it exists, under another user
    except OSError:
        return True
    return True


class RunLock:
    """One run at a time per workspace: a row in the state store, kept fresh by a heartbeat.

    A holder that was killed leaves its row behind; the next run takes it over at once when the
    holder ran on the same host and its process is gone, or when its heartbeat is older than
    ``LOCK_STALE_SECONDS`` (a holder on another host, or a reused process number).

    Example:
        >>> import tempfile
        >>> store = StateStore.for_workspace(tempfile.mkdtemp())
        >>> with RunLock(store):
        ...     RunLock(store).acquire()
        Traceback (most recent call last):
        ...
        integrate.state.RunLocked: another run of this workspace is in progress ...
    """

    def __init__(self, store: StateStore) -> None:
        self.store = store
        self.token = uuid.uuid4().hex
        self.host = socket.gethostname()[:255]
        self._stop = threading.Event()
        self._beat: threading.Thread | None = None

    def _stale(self, row: dict[str, Any]) -> bool:
        if time.time() - float(row["heartbeat"]) > LOCK_STALE_SECONDS:
            return True
        return row["host"] == self.host and not _alive(int(row["pid"]))

    def _refusal(self, row: dict[str, Any] | None) -> RunLocked:
        who = (f" (process {row['pid']} on {row['host']}, started {row['started_at']}, "
               f"last seen {max(0.0, time.time() - float(row['heartbeat'])):.0f} s ago)") if row else ""
        return RunLocked(f"another run of this workspace is in progress{who}; wait for it to finish "
                         f"(a run that was killed frees the lock at once on this host, "
                         f"elsewhere after {LOCK_STALE_SECONDS:.0f} s)")

    def _holder(self) -> dict[str, Any] | None:
        rows = self.store._read(select(run_lock_table).where(run_lock_table.c.lock_id == 1))
        return rows[0] if rows else None

    def acquire(self) -> RunLock:
        t = run_lock_table
        try:
            with self.store.engine.begin() as conn:
                row = conn.execute(select(t).where(t.c.lock_id == 1)).mappings().first()
                if row is not None and not self._stale(dict(row)):
                    raise self._refusal(dict(row))
                if row is not None:
                    conn.execute(delete(t).where(t.c.lock_id == 1, t.c.token == row["token"]))
                conn.execute(insert(t).values(lock_id=1, token=self.token, pid=os.getpid(), host=self.host,
                                              started_at=now_iso(), heartbeat=time.time()))
        except SQLAlchemyError as exc:  # the other run inserted its row first
            raise self._refusal(self._holder()) from exc
        self._stop.clear()
        self._beat = threading.Thread(target=self._heartbeat, name="run-lock-heartbeat", daemon=True)
        self._beat.start()
        return self

    def _heartbeat(self) -> None:
        t = run_lock_table
        while not self._stop.wait(HEARTBEAT_SECONDS):
            try:
                with self.store.engine.begin() as conn:
                    conn.execute(update(t).where(t.c.lock_id == 1, t.c.token == self.token)
                                 .values(heartbeat=time.time()))
            except SQLAlchemyError:
                continue  # busy database: the next beat tries again, well within the stale limit

    def release(self) -> None:
        self._stop.set()
        if self._beat is not None:
            self._beat.join()
            self._beat = None
        t = run_lock_table
        try:
            with self.store.engine.begin() as conn:
                conn.execute(delete(t).where(t.c.lock_id == 1, t.c.token == self.token))
        except SQLAlchemyError:
            pass  # the row stays; the next run sees this process gone and takes the lock over

    def __enter__(self) -> RunLock:
        return self.acquire()

    def __exit__(self, *_exc: object) -> None:
        self.release()
