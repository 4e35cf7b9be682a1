"""What a revision checks before it changes anything, so it runs on any older store."""

from __future__ import annotations

from alembic import op
from sqlalchemy import inspect


def has_table(name: str) -> bool:
    return inspect(op.get_bind()).has_table(name)


def has_index(table: str, name: str) -> bool:
    return any(ix["name"] == name for ix in inspect(op.get_bind()).get_indexes(table))


def has_column(table: str, name: str) -> bool:
    return any(col["name"] == name for col in inspect(op.get_bind()).get_columns(table))
