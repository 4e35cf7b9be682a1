"""The state schema as it stood before migrations: runs and review decisions.

Written out here (not imported from the modules) so it stays what it was when those modules
change. Each table is made only when it is missing: a store from before migrations has all or
some of them already, with rows that stay as they are.

Revision ID: 0001
Revises:
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

from integrate.migrations._util import has_index, has_table

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def _pair() -> list[sa.Column]:
    return [sa.Column(c, sa.String, nullable=False) for c in ("source_a", "record_id_a", "source_b", "record_id_b")]


TABLES = {
    "run": lambda: [
        sa.Column("run_id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("started_at", sa.String(32), nullable=False),
        sa.Column("finished_at", sa.String(32), nullable=False),
        sa.Column("records", sa.Integer, nullable=False),
        sa.Column("entities", sa.Integer, nullable=False),
        sa.Column("output_dir", sa.Text),
        sa.Column("report", sa.Text),
        sa.Column("summary", sa.Text),
    ],
    "run_file": lambda: [
        sa.Column("run_id", sa.Integer, sa.ForeignKey("run.run_id"), nullable=False),
        sa.Column("kind", sa.String(16), nullable=False),
        sa.Column("path", sa.Text, nullable=False),
        sa.Column("sha256", sa.String(64)),
    ],
    "run_crosswalk": lambda: [
        sa.Column("run_id", sa.Integer, sa.ForeignKey("run.run_id"), primary_key=True),
        sa.Column("source", sa.String(200), primary_key=True),
        sa.Column("record_id", sa.String(200), primary_key=True),
        sa.Column("entity_id", sa.String(32), nullable=False),
        sa.Column("record_hash", sa.String(16)),
    ],
    "run_change": lambda: [
        sa.Column("run_id", sa.Integer, sa.ForeignKey("run.run_id"), nullable=False),
        sa.Column("entity_id", sa.String(32), nullable=False),
        sa.Column("change", sa.String(16), nullable=False),
        sa.Column("related_ids", sa.Text),
        sa.Column("records", sa.Integer),
        sa.Column("records_added", sa.Integer),
        sa.Column("records_removed", sa.Integer),
    ],
    "review_decision": lambda: [
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        *_pair(),
        sa.Column("decision", sa.String(16), nullable=False),
        sa.Column("reviewer", sa.String(200), nullable=False),
        sa.Column("decided_at", sa.String(32), nullable=False),
        sa.Column("note", sa.Text),
        sa.Column("probability", sa.Float),
        sa.Column("weight", sa.Float),
        sa.Column("run_decision", sa.String(16)),
        sa.Column("scores", sa.Text),
        sa.Column("origin", sa.String(16), nullable=False),
        sa.Column("revision", sa.Integer, nullable=False),
        sa.UniqueConstraint("source_a", "record_id_a", "source_b", "record_id_b", name="uq_review_decision_pair"),
    ],
    "review_history": lambda: [
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("decision_id", sa.Integer, nullable=False),
        sa.Column("action", sa.String(16), nullable=False),
        sa.Column("at", sa.String(32), nullable=False),
        sa.Column("row", sa.Text, nullable=False),
    ],
    "review_claim": lambda: [
        sa.Column("pair", sa.String, primary_key=True),
        sa.Column("reviewer", sa.String(200), nullable=False),
        sa.Column("until", sa.Float, nullable=False),
    ],
    "review_audit": lambda: [
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        *_pair(),
        sa.Column("drawn_at", sa.String(32), nullable=False),
        sa.Column("seed", sa.Integer, nullable=False),
        sa.Column("probability", sa.Float),
        sa.UniqueConstraint("source_a", "record_id_a", "source_b", "record_id_b", name="uq_review_audit_pair"),
    ],
}


def upgrade() -> None:
    for name, columns in TABLES.items():  # in this order: run before the tables that refer to it
        if not has_table(name):
            op.create_table(name, *columns())
    if not has_index("run_crosswalk", "ix_run_crosswalk_entity"):
        op.create_index("ix_run_crosswalk_entity", "run_crosswalk", ["entity_id"])

