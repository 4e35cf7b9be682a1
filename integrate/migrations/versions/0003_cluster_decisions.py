"""Tables for decisions on a whole cluster (review/store.py): the decision and the pair decisions
it stored, so that one undo removes them together.

Made here, under the migration lock, rather than by the decision store's ``create_all``: two
processes opening a store at once both saw the tables missing and both created them.

Revision ID: 0003
Revises: 0002
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

from integrate.migrations._util import has_table

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    if not has_table("review_cluster_decision"):
        op.create_table(
            "review_cluster_decision",
            sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
            sa.Column("cluster_id", sa.String, nullable=False),
            sa.Column("choice", sa.String(16), nullable=False),
            sa.Column("reviewer", sa.String(200), nullable=False),
            sa.Column("decided_at", sa.String(32), nullable=False),
            sa.Column("note", sa.Text),
            sa.Column("parts", sa.Text, nullable=False),
        )
    if not has_table("review_cluster_member"):
        op.create_table(
            "review_cluster_member",
            sa.Column("cluster_decision_id", sa.Integer, primary_key=True),
            sa.Column("decision_id", sa.Integer, primary_key=True),
            sa.Column("revision", sa.Integer, nullable=False),
        )
