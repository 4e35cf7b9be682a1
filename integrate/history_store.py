"""What each run saw of its inputs: a profile per source column and the full text of every mapping file.

Two tables on their own ``MetaData`` in the state database (``state_engine``):
``source_profile`` (per run and source: the data file's SHA-256 and the column profiles of
``mapping/snapshot.py`` as JSON) and ``mapping_text`` (the text of each mapping-file version,
keyed by its SHA-256; which run used which version is already in the state store's
``run_file`` table). ``integrate check`` compares this month's export with the last stored
profile of another data file, ``integrate mappings`` lists and compares mapping versions.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
from sqlalchemy import Column, Engine, ForeignKey, Integer, MetaData, String, Table, Text, delete, insert, select
from sqlalchemy.exc import SQLAlchemyError

from .mapping.load import file_hash
from .mapping.snapshot import declared_entry, snapshot_source
from .mapping.spec import SourceMapping
from .sources import read_source
from .state import (
    STATE_URL_ENV,
    StateError,
    create_tables,
    run_file_table,
    run_table,
    shown_url,
    state_database,
    state_engine,
)
from .workspace import Workspace

history_metadata = MetaData()

source_profile_table = Table(
    "source_profile", history_metadata,
    Column("run_id", Integer, ForeignKey(run_table.c.run_id), primary_key=True),
    Column("source", String(200), primary_key=True),
    Column("data_sha256", String(64)),  # empty for a database source read by URL
    Column("profile", Text, nullable=False),  # JSON: column -> profile (mapping/snapshot.py)
)
mapping_text_table = Table(
    "mapping_text", history_metadata,
    Column("sha256", String(64), primary_key=True),
    Column("text", Text, nullable=False),
)


@dataclass(frozen=True)
class StoredProfile:
    """The column profiles of one source as one run saw them."""

    run_id: int
    started_at: str
    data_sha256: str | None
    columns: dict[str, dict[str, Any]]


def _engine(root: Path, create: bool) -> Engine | None:
    if not create and not os.environ.get(STATE_URL_ENV, "").strip() and not state_database(root).exists():
        return None
    engine = state_engine(root)
    create_tables(engine, history_metadata, [source_profile_table, mapping_text_table])
    return engine


def _data_hash(ws: Workspace, entry: Any) -> str | None:
    path = entry.data_path(ws.root)
    return file_hash(path) if path is not None and path.is_file() else None


class SourceProfiles:
    """Profiles of the sources a run reads, taken from each frame as it is read (no second read).

    Called with each source entry and its frame as read; a data file profiled before (same
    SHA-256) reuses its stored profile. ``record_inputs`` stores what was gathered.
    """

    def __init__(self, ws: Workspace) -> None:
        self.ws = ws
        self.engine = _engine(ws.root, create=True)
        self.found: dict[str, tuple[str | None, dict[str, dict[str, Any]]]] = {}

    def __call__(self, entry: Any, raw: pd.DataFrame) -> None:
        digest = _data_hash(self.ws, entry)
        columns = _stored_for(self.engine, entry.mapping, digest) if digest and self.engine is not None else None
        self.found[entry.mapping.source] = (digest, columns if columns is not None
                                            else snapshot_source(raw, entry.mapping))


def record_inputs(ws: Workspace, run_id: int, mapping_hashes: dict[str, str],
                  profiles: SourceProfiles | None = None) -> None:
    """Store the text of the mapping files a run used and a profile of every source it read.

    Called once per written run, after the state store recorded it. ``profiles`` holds the
    profiles taken while the run read its sources; a source missing there is read again.
    """
    engine = _engine(ws.root, create=True)
    assert engine is not None
    gathered = profiles.found if profiles is not None else {}
    texts: dict[str, str] = {}
    for shown in mapping_hashes:
        data = (ws.root / shown).read_bytes() if not Path(shown).is_absolute() else Path(shown).read_bytes()
        digest = hashlib.sha256(data).hexdigest()
        texts[digest] = data.decode("utf-8", errors="replace")
    rows = []
    for entry in ws.sources:
        if entry.mapping.source in gathered:
            digest, columns = gathered[entry.mapping.source]
        else:
            digest = _data_hash(ws, entry)
            columns = _stored_for(engine, entry.mapping, digest) if digest else None
        if columns is None:
            raw = read_source(entry.mapping.read, ws.root, name=entry.mapping.source)
            columns = snapshot_source(raw, entry.mapping)
        rows.append({"run_id": run_id, "source": entry.mapping.source, "data_sha256": digest,
                     "profile": json.dumps(columns, sort_keys=True)})
    try:
        with engine.begin() as conn:
            known = {r[0] for r in conn.execute(select(mapping_text_table.c.sha256).where(
                mapping_text_table.c.sha256.in_(list(texts))))}
            new = [{"sha256": h, "text": t} for h, t in texts.items() if h not in known]
            if new:
                conn.execute(insert(mapping_text_table), new)
            conn.execute(delete(source_profile_table).where(source_profile_table.c.run_id == run_id))
            if rows:
                conn.execute(insert(source_profile_table), rows)
    except SQLAlchemyError as exc:
        raise StateError(f"could not record profiles in {shown_url(str(engine.url))}: {exc}") from exc


def _stored_for(engine: Engine, mapping: SourceMapping, digest: str) -> dict[str, dict[str, Any]] | None:
    """The profile already stored for this very data file, with today's mapping declarations.

    A run on an export profiled before (a re-run after review) then costs no profiling; a column
    the mapping reads now but did not then lacks its patterns, so the source is profiled again.
    """
    p = source_profile_table
    rows = _read(engine, select(p.c.profile).where(p.c.source == mapping.source, p.c.data_sha256 == digest)
                 .order_by(p.c.run_id.desc()).limit(1))
    if not rows:
        return None
    columns: dict[str, dict[str, Any]] = json.loads(rows[0]["profile"])
    maps = mapping.column_maps()
    for column, profile in columns.items():
        entry = maps.get(column)
        if entry is not None and not entry.ignore and not profile.get("kind"):
            return None
        profile["declared"] = declared_entry(entry)
    return columns


def _read(engine: Engine, statement: Any) -> list[dict[str, Any]]:
    try:
        with engine.connect() as conn:
            return [dict(r) for r in conn.execute(statement).mappings().all()]
    except SQLAlchemyError as exc:
        raise StateError(f"could not read {shown_url(str(engine.url))}: {exc}") from exc


def previous_profile(root: Path, source: str, current_sha256: str | None) -> StoredProfile | None:
    """The latest stored profile of ``source`` taken from another data file than the current one.

    Running twice on the same export must not hide last month's drift, so profiles of the very
    file being checked are skipped (a database source, with no file hash, uses the latest).
    """
    engine = _engine(root, create=False)
    if engine is None:
        return None
    p, r = source_profile_table, run_table
    statement = (select(p.c.run_id, p.c.data_sha256, p.c.profile, r.c.started_at)
                 .join(r, r.c.run_id == p.c.run_id).where(p.c.source == source).order_by(p.c.run_id.desc()))
    for row in _read(engine, statement):
        if current_sha256 is None or row["data_sha256"] != current_sha256:
            return StoredProfile(int(row["run_id"]), row["started_at"], row["data_sha256"], json.loads(row["profile"]))
    return None


def mapping_versions(root: Path, file: str | None = None) -> pd.DataFrame:
    """Every run's mapping files: run_id, started_at, path, sha256, has_text (oldest run first)."""
    columns = ["run_id", "started_at", "path", "sha256", "has_text"]
    engine = _engine(root, create=False)
    if engine is None:
        return pd.DataFrame(columns=columns)
    f, r, t = run_file_table, run_table, mapping_text_table
    statement = (select(f.c.run_id, r.c.started_at, f.c.path, f.c.sha256, t.c.sha256.label("stored"))
                 .join(r, r.c.run_id == f.c.run_id).outerjoin(t, t.c.sha256 == f.c.sha256)
                 .where(f.c.kind == "mapping").order_by(f.c.run_id, f.c.path))
    if file is not None:
        statement = statement.where(f.c.path == file)
    rows = _read(engine, statement)
    frame = pd.DataFrame(rows, columns=["run_id", "started_at", "path", "sha256", "stored"])
    frame["has_text"] = frame["stored"].notna()
    return frame[columns]


def mapping_texts(root: Path, run_id: int) -> dict[str, str | None]:
    """Path -> text of each mapping file a run used (None when the run predates text recording)."""
    versions = mapping_versions(root)
    versions = versions[versions["run_id"] == run_id]
    engine = _engine(root, create=False)
    if engine is None or versions.empty:
        return {}
    t = mapping_text_table
    stored = {r["sha256"]: r["text"] for r in _read(engine, select(t).where(t.c.sha256.in_(list(versions["sha256"]))))}
    return {row.path: stored.get(row.sha256) for row in versions.itertuples(index=False)}
