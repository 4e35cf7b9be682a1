"""Database tables and queries: a SQLite file, or any database SQLAlchemy reaches."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import sqlalchemy as sa

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import SourceFile, text_frame


def read_sqlite(path: Path, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read a table or query from a SQLite file, opened read-only."""
    uri = f"{path.resolve().as_uri()}?mode=ro"
    engine = sa.create_engine("sqlite://", creator=lambda: sqlite3.connect(uri, uri=True))
    return _read(engine, spec, src)


def read_database(spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read a table or query through a SQLAlchemy URL.

    The query runs in a transaction that is rolled back, but read-only access is up to
    the database account: give the integration a user that can only read.
    """
    try:
        engine = sa.create_engine(src.path)
    except (sa.exc.NoSuchModuleError, ImportError) as exc:
        raise SourceError(
            f"no database driver for source '{src.name}': {exc}",
            file=src.shown,
            reason="missing_driver",
            hint="install the driver package for this database (e.g. psycopg for PostgreSQL)",
        ) from exc
    except sa.exc.ArgumentError as exc:
        raise SourceError(
            f"cannot use the database URL of source '{src.name}': {exc}",
            file=src.shown,
            reason="bad_url",
            hint="write `url` as dialect+driver://user@host/database",
        ) from exc
    return _read(engine, spec, src)


def _read(engine: sa.Engine, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    try:
        with engine.connect() as conn:
            statement: sa.Executable
            if spec.query:
                statement = sa.text(spec.query)
            else:
                table = spec.table or ""  # ReadSpec requires a table when there is no query
                _check_table(conn, table, src)
                statement = sa.select(sa.text("*")).select_from(sa.table(table))
            frame = pd.read_sql_query(statement, conn, coerce_float=False)
            conn.rollback()
    except (sa.exc.SQLAlchemyError, sqlite3.Error, UnicodeDecodeError) as exc:  # a damaged file decodes badly
        raise SourceError(
            f"reading source '{src.name}' failed: {getattr(exc, 'orig', None) or exc}"[:400],
            file=src.shown,
            value=spec.query or spec.table,
            reason="bad_query" if spec.query else "bad_database",
            hint="check `query` or `table`, and that the file or server is the database you mean",
        ) from exc
    finally:
        engine.dispose()
    return text_frame(frame, np.arange(1, len(frame) + 1), src)


def _check_table(conn: sa.Connection, table: str, src: SourceFile) -> None:
    inspector = sa.inspect(conn)
    names = sorted(set(inspector.get_table_names()) | set(inspector.get_view_names()))
    if table in names:
        return
    listed = ", ".join(f"'{name}'" for name in names) or "none"
    raise SourceError(
        f"table '{table}' not found in source '{src.name}' (tables: {listed})",
        file=src.shown,
        value=table,
        reason="missing_table",
        hint="set `table` to one of the listed tables, or give a `query`",
    )
