"""work units: chunk_results rows carry their tasks so helper workers claim them from the table

Revision ID: 0005_work_units
Revises: 0004_token_spend
Create Date: 2026-12-02

A row of chunk_results is now one unit of work (several engine chunks): its tasks are stored in
the new nullable ``tasks`` column and it starts 'pending' until a worker claims it. Rows are
deleted when their job ends. The previous release never reads 'pending' rows.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0005_work_units"
down_revision: str | None = "0004_token_spend"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_STATUS_OLD = "status IN ('running', 'done')"
_STATUS_NEW = "status IN ('pending', 'running', 'done')"


def upgrade() -> None:
    """Add chunk_results.tasks and allow the 'pending' status."""
    # batch mode rebuilds the table on SQLite, which cannot alter a CHECK constraint in place.
    with op.batch_alter_table("chunk_results") as batch:
        batch.add_column(sa.Column("tasks", sa.JSON(), nullable=True))
        batch.drop_constraint(op.f("ck_chunk_results_status"), type_="check")
        batch.create_check_constraint(op.f("ck_chunk_results_status"), _STATUS_NEW)


def downgrade() -> None:
    """Drop unfinished units and chunk_results.tasks; restore the old status check."""
    op.execute("DELETE FROM chunk_results WHERE status = 'pending'")
    with op.batch_alter_table("chunk_results") as batch:
        batch.drop_constraint(op.f("ck_chunk_results_status"), type_="check")
        batch.create_check_constraint(op.f("ck_chunk_results_status"), _STATUS_OLD)
        batch.drop_column("tasks")
