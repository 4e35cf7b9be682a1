"""Schema migrations of the state database (Alembic), run in place on SQLite and PostgreSQL.

``upgrade(engine)`` brings a state database to the newest schema: a new database gets every
table, an older one (including a store written before migrations existed, which has no
``alembic_version`` table) gets only what it lacks, and its rows are kept. ``state.state_engine``
calls it once per engine, so every module that works on the state database sees the newest schema.

Several processes may start at once on a fresh database: the upgrade holds a lock while it runs
(``pg_advisory_xact_lock`` on PostgreSQL, ``BEGIN IMMEDIATE`` on SQLite), so exactly one of them
creates the tables and the others find them made.

Adding a revision: write ``versions/NNNN_what.py`` with ``down_revision`` set to the newest one,
using ``op`` and checking what exists first (``_util.has_table`` / ``has_index`` / ``has_column``),
so the revision also works on a store whose tables another module created with ``create_all``.
A new table on a module's own ``MetaData`` needs no revision (``create_all`` makes it); a new column
on an existing table does, or older stores will lack it.
"""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, create_engine, event, text

HERE = Path(__file__).resolve().parent
_LOCK_KEY = 7_391_004_221  # advisory lock number of the state schema upgrade (PostgreSQL)


def _config() -> Config:
    config = Config()
    config.set_main_option("script_location", str(HERE))
    return config


def head() -> str:
    """The newest revision this version of integrate knows."""
    return str(ScriptDirectory.from_config(_config()).get_current_head())


def current(engine: Engine) -> str | None:
    """The revision a database is at (None: never migrated, e.g. a store from before migrations)."""
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


class NewerSchema(RuntimeError):
    """The database was upgraded by a newer version of integrate than this one."""


def upgrade(engine: Engine) -> None:
    """Bring the database to ``head()``; a no-op (one read) when it is there already.

    Raises:
        NewerSchema: the database is at a revision this version does not know.
    """
    newest = head()
    at = current(engine)
    if at == newest:
        return
    known = {r.revision for r in ScriptDirectory.from_config(_config()).walk_revisions()}
    if at is not None and at not in known:
        raise NewerSchema(f"the state database is at schema revision {at}, newer than this version of "
                          f"integrate knows (newest {newest}): upgrade integrate")
    if engine.dialect.name == "sqlite":
        _upgrade_sqlite(engine)
        return
    with engine.begin() as conn:
        if engine.dialect.name == "postgresql":
            conn.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": _LOCK_KEY})
        _run(conn)


def _upgrade_sqlite(engine: Engine) -> None:
    """SQLite's driver commits DDL as it goes; a private engine that opens with BEGIN IMMEDIATE
    holds the write lock for the whole upgrade (SQLAlchemy's documented recipe for pysqlite)."""
    private = create_engine(engine.url, connect_args={"timeout": 60, "isolation_level": None})

    @event.listens_for(private, "begin")
    def _begin(conn) -> None:  # noqa: ANN001 - a SQLAlchemy connection
        conn.exec_driver_sql("BEGIN IMMEDIATE")

    try:
        with private.begin() as conn:
            _run(conn)
    finally:
        private.dispose()


def _run(conn) -> None:  # noqa: ANN001 - a SQLAlchemy connection inside a transaction
    config = _config()
    config.attributes["connection"] = conn
    command.upgrade(config, "head")
