"""State-database migrations and concurrent writers, on SQLite and on a real PostgreSQL server.

An "old store" is built from a frozen copy of the schema as it stood before migrations existed
(the tables ``integrate.state`` and ``integrate.review.store`` made with ``create_all``), filled
with rows, then opened the ordinary way: it must be upgraded in place with every row kept.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from sqlalchemy import (
    Column,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
    create_engine,
    insert,
    inspect,
    text,
)

from integrate import migrations, state
from integrate.review import store as review_store
from integrate.review.store import DecisionStore, NewDecision
from integrate.state import STATE_URL_ENV, NewRun, StateError, StateStore, state_url

REPO = Path(__file__).resolve().parent.parent


def old_schema() -> MetaData:
    """The state and review tables as main had them before migrations (frozen here on purpose)."""
    md = MetaData()
    Table("run", md, Column("run_id", Integer, primary_key=True, autoincrement=True),
          Column("started_at", String(32), nullable=False), Column("finished_at", String(32), nullable=False),
          Column("records", Integer, nullable=False), Column("entities", Integer, nullable=False),
          Column("output_dir", Text), Column("report", Text), Column("summary", Text))
    Table("run_file", md, Column("run_id", Integer, ForeignKey("run.run_id"), nullable=False),
          Column("kind", String(16), nullable=False), Column("path", Text, nullable=False),
          Column("sha256", String(64)))
    Table("run_crosswalk", md, Column("run_id", Integer, ForeignKey("run.run_id"), primary_key=True),
          Column("source", String(200), primary_key=True), Column("record_id", String(200), primary_key=True),
          Column("entity_id", String(32), nullable=False), Column("record_hash", String(16)),
          Index("ix_run_crosswalk_entity", "entity_id"))
    Table("run_change", md, Column("run_id", Integer, ForeignKey("run.run_id"), nullable=False),
          Column("entity_id", String(32), nullable=False), Column("change", String(16), nullable=False),
          Column("related_ids", Text), Column("records", Integer), Column("records_added", Integer),
          Column("records_removed", Integer))
    pair = ["source_a", "record_id_a", "source_b", "record_id_b"]
    Table("review_decision", md, Column("id", Integer, primary_key=True, autoincrement=True),
          *[Column(c, String, nullable=False) for c in pair],
          Column("decision", String(16), nullable=False), Column("reviewer", String(200), nullable=False),
          Column("decided_at", String(32), nullable=False), Column("note", Text), Column("probability", Float),
          Column("weight", Float), Column("run_decision", String(16)), Column("scores", Text),
          Column("origin", String(16), nullable=False), Column("revision", Integer, nullable=False),
          UniqueConstraint(*pair, name="uq_review_decision_pair"))
    Table("review_history", md, Column("id", Integer, primary_key=True, autoincrement=True),
          Column("decision_id", Integer, nullable=False), Column("action", String(16), nullable=False),
          Column("at", String(32), nullable=False), Column("row", Text, nullable=False))
    Table("review_claim", md, Column("pair", String, primary_key=True),
          Column("reviewer", String(200), nullable=False), Column("until", Float, nullable=False))
    Table("review_audit", md, Column("id", Integer, primary_key=True, autoincrement=True),
          *[Column(c, String, nullable=False) for c in pair], Column("drawn_at", String(32), nullable=False),
          Column("seed", Integer, nullable=False), Column("probability", Float),
          UniqueConstraint(*pair, name="uq_review_audit_pair"))
    return md


def make_old_store(url: str, *, only: list[str] | None = None) -> None:
    """Create the old schema (or some of its tables) and fill it with one run and one decision."""
    if url.startswith("sqlite:///"):
        Path(url.removeprefix("sqlite:///")).parent.mkdir(parents=True, exist_ok=True)
    md = old_schema()
    engine = create_engine(url)
    try:
        md.create_all(engine, tables=[md.tables[n] for n in only] if only else None)
        with engine.begin() as conn:
            if only is None or "run" in only:
                conn.execute(insert(md.tables["run"]).values(  # numbered by the database, as main did
                    started_at="2026-11-01T08:00:00Z", finished_at="2026-11-01T08:05:00Z", records=2,
                    entities=1, output_dir="out", report=None, summary='{"created": 1}'))
                conn.execute(insert(md.tables["run_file"]).values(run_id=1, kind="input", path="a.csv",
                                                                  sha256="a" * 64))
                conn.execute(insert(md.tables["run_crosswalk"]), [
                    {"run_id": 1, "source": "shop", "record_id": "1", "entity_id": "E1", "record_hash": "0" * 16},
                    {"run_id": 1, "source": "club", "record_id": "7", "entity_id": "E1", "record_hash": "1" * 16}])
                conn.execute(insert(md.tables["run_change"]).values(
                    run_id=1, entity_id="E1", change="created", related_ids="", records=2, records_added=2,
                    records_removed=0))
            conn.execute(insert(md.tables["review_decision"]).values(
                source_a="club", record_id_a="7", source_b="shop", record_id_b="1", decision="same",
                reviewer="ana", decided_at="2026-11-02T09:00:00Z", origin="possible", revision=1))
            conn.execute(insert(md.tables["review_history"]).values(decision_id=1, action="decide",
                                                                    at="2026-11-02T09:00:00Z", row="{}"))
    finally:
        engine.dispose()


def test_an_old_store_is_upgraded_in_place_with_its_rows_kept(tmp_path: Path, state_backend: str) -> None:
    url = state_url(tmp_path)
    make_old_store(url)
    store = StateStore.for_workspace(tmp_path)  # opening it the ordinary way upgrades it
    assert migrations.current(store.engine) == migrations.head()
    runs = store.runs()
    assert [(r.run_id, r.records, r.summary) for r in runs] == [(1, 2, {"created": 1})]
    assert store.crosswalk(1)[["source", "record_id", "entity_id"]].values.tolist() == [
        ["club", "7", "E1"], ["shop", "1", "E1"]]
    assert store.changes(1)["change"].tolist() == ["created"]
    assert store.files(1)["path"].tolist() == ["a.csv"]
    decisions = DecisionStore.for_workspace(tmp_path)
    assert decisions.decisions()[["record_id_a", "decision", "reviewer"]].values.tolist() == [["7", "same", "ana"]]
    # the upgraded store takes new rows next to the old ones
    second = store.record_run(NewRun(started_at="2026-12-01T08:00:00Z", crosswalk=pd.DataFrame(
        {"source": ["shop"], "record_id": ["1"], "entity_id": ["E1"]})))
    assert second == 2 and store.issued_ids() == {"E1"}
    decisions.record(NewDecision(source_a="shop", record_id_a="2", source_b="club", record_id_b="8",
                                 decision="different", reviewer="bo"))
    assert len(decisions.decisions()) == 2 and len(decisions.history()) == 2
    indexes = {ix["name"] for t in ("run_file", "run_change", "review_history")
               for ix in inspect(store.engine).get_indexes(t)}
    assert {"ix_run_file_run", "ix_run_change_run", "ix_review_history_decision"} <= indexes


def test_a_store_with_only_some_tables_gets_the_rest(tmp_path: Path, state_backend: str) -> None:
    """The review page was used before any run: only the review tables exist."""
    make_old_store(state_url(tmp_path), only=["review_decision", "review_history"])
    store = StateStore.for_workspace(tmp_path)
    assert store.last_run() is None
    assert {"run", "run_crosswalk", "review_claim", "review_audit"} <= set(inspect(store.engine).get_table_names())
    assert len(DecisionStore.for_workspace(tmp_path).decisions()) == 1


def test_every_column_the_code_declares_exists_after_upgrading_an_old_store(tmp_path: Path,
                                                                             state_backend: str) -> None:
    """A column added to a table without a migration revision would be missing from upgraded stores."""
    make_old_store(state_url(tmp_path))
    engine = StateStore.for_workspace(tmp_path).engine
    DecisionStore.for_workspace(tmp_path)
    have = inspect(engine)
    missing = [f"{table.name}.{column.name}" for md in (state.metadata, review_store.metadata)
               for table in md.sorted_tables for column in table.columns
               if column.name not in {c["name"] for c in have.get_columns(table.name)}]
    assert missing == [], f"add a revision under integrate/migrations/versions for {missing}"


def test_a_store_from_a_newer_version_is_refused_with_a_clear_message(tmp_path: Path, state_backend: str) -> None:
    url = state_url(tmp_path)
    StateStore.for_workspace(tmp_path)
    engine = state._ENGINES.pop(url)
    with engine.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = '9999'"))
    engine.dispose()
    with pytest.raises(StateError, match="newer than this version of integrate"):
        StateStore.for_workspace(tmp_path)
    assert url not in state._ENGINES  # nothing half-opened is kept


def test_upgrading_twice_changes_nothing(tmp_path: Path, state_backend: str) -> None:
    engine = StateStore.for_workspace(tmp_path).engine
    migrations.upgrade(engine)
    with engine.connect() as conn:
        assert conn.execute(text("SELECT version_num FROM alembic_version")).scalars().all() == [migrations.head()]


# -- several processes at once --------------------------------------------------------------------

WORKER = r"""
import sys
import pandas as pd
from integrate.review.store import DecisionConflict, DecisionStore, NewDecision
from integrate.state import NewRun, StateStore

me, workspace = sys.argv[1], sys.argv[2]
store, decisions = StateStore.for_workspace(workspace), DecisionStore.for_workspace(workspace)
stored = conflicts = 0
for k in range(30):
    # pairs 0-9 are everyone's (all race for them), the rest this worker's alone
    a, b = (f"s{k}", f"s{k}") if k < 10 else (f"{me}-{k}", f"{me}-{k}")
    try:
        decisions.record(NewDecision(source_a="shop", record_id_a=a, source_b="club", record_id_b=b,
                                     decision="same" if k % 2 else "different", reviewer=me))
        stored += 1
    except DecisionConflict:
        conflicts += 1
    if k % 10 == 0:
        store.record_run(NewRun(started_at="2026-12-01T00:00:00Z", crosswalk=pd.DataFrame(
            {"source": ["shop"] * 3, "record_id": ["1", "2", "3"], "entity_id": [me] * 3})))
print(stored, conflicts)
"""


def test_concurrent_processes_lose_no_decision_and_no_run(tmp_path: Path, state_backend: str) -> None:
    """Four processes start on a fresh database at once (all upgrade it), then record decisions and
    runs side by side: one schema, every decision and run stored, each shared pair decided once."""
    env = {**os.environ, STATE_URL_ENV: state_url(tmp_path), "PYTHONPATH": str(REPO)}
    names = [f"w{k}" for k in range(4)]
    procs = [subprocess.Popen([sys.executable, "-c", WORKER, name, str(tmp_path)], env=env,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for name in names]
    results = [p.communicate(timeout=300) for p in procs]
    for p, (_, err) in zip(procs, results):
        assert p.returncode == 0, err
    stored = sum(int(out.split()[0]) for out, _ in results)
    conflicts = sum(int(out.split()[1]) for out, _ in results)
    decisions = DecisionStore.for_workspace(tmp_path)
    frame = decisions.decisions()
    assert len(frame) == 10 + 4 * 20 == stored  # every worker's own pairs and each shared pair once
    assert conflicts == 3 * 10
    assert not frame.duplicated(["source_a", "record_id_a", "source_b", "record_id_b"]).any()
    assert (decisions.history()["action"] == "decide").sum() == stored
    store = StateStore.for_workspace(tmp_path)
    runs = store.runs()
    assert len(runs) == 4 * 3 and len({r.run_id for r in runs}) == 12
    assert all(len(store.crosswalk(r.run_id)) == 3 for r in runs)
    with store.engine.connect() as conn:
        assert conn.execute(text("SELECT count(*) FROM alembic_version")).scalar() == 1
