"""Indexes for the lookups a shared store makes often: a run's files and changes, a decision's history.

Without them, reading one run's changes (``integrate changes``) or files scans every run ever
recorded, which a team database of monthly runs keeps adding to.

Revision ID: 0002
Revises: 0001
"""

from __future__ import annotations

from alembic import op

from integrate.migrations._util import has_index

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None

INDEXES = [
    ("ix_run_file_run", "run_file", ["run_id"]),
    ("ix_run_change_run", "run_change", ["run_id"]),
    ("ix_review_history_decision", "review_history", ["decision_id"]),
]


def upgrade() -> None:
    for name, table, columns in INDEXES:
        if not has_index(table, name):
            op.create_index(name, table, columns)
