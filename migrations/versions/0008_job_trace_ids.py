"""job trace ids: the HTTP request id that created each request, rerun and exploration

Revision ID: 0008_job_trace_ids
Revises: 0007_webhooks
Create Date: 2026-12-02

Adds a nullable ``trace_id`` column to the three job tables. The previous release neither reads
nor writes it, so it keeps working against the upgraded schema; rows it creates have no trace id
and their republished messages carry none, as before.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0008_job_trace_ids"
down_revision: str | None = "0007_webhooks"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_TABLES = ("requests", "reruns", "analyses")


def upgrade() -> None:
    """Add trace_id to requests, reruns and analyses (the explorations' table)."""
    for table in _TABLES:
        with op.batch_alter_table(table) as batch:
            batch.add_column(sa.Column("trace_id", sa.String(length=64), nullable=True))


def downgrade() -> None:
    """Drop the trace_id columns."""
    for table in _TABLES:
        with op.batch_alter_table(table) as batch:
            batch.drop_column("trace_id")
