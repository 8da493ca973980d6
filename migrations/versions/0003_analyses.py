"""analyses: sensitivity grids and robustness panels as jobs; requests.effect_source

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-15

Adds a table and a nullable column, and widens chunk_results' job_kind check to 'analysis';
the previous release never writes 'analysis', so it keeps working against the upgraded schema.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_CHUNK_KINDS_OLD = "job_kind IN ('request', 'rerun')"
_CHUNK_KINDS_NEW = "job_kind IN ('request', 'rerun', 'analysis')"


def _stamp(name: str, nullable: bool) -> sa.Column:
    return sa.Column(name, sa.DateTime(timezone=True), nullable=nullable)


def _chunk_kinds(check: str) -> None:
    # batch mode rebuilds the table on SQLite, which cannot alter a CHECK constraint in place.
    with op.batch_alter_table("chunk_results") as batch:
        batch.drop_constraint(op.f("ck_chunk_results_job_kind"), type_="check")
        batch.create_check_constraint(op.f("ck_chunk_results_job_kind"), check)


def upgrade() -> None:
    """Create analyses, add requests.effect_source, allow chunk rows of analyses."""
    op.create_table(
        "analyses",
        sa.Column("id", sa.String(length=32), nullable=False),
        sa.Column("request_id", sa.String(length=32), nullable=False),
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("params", sa.JSON(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("requested_by", sa.String(length=200), nullable=False),
        _stamp("created_at", False),
        _stamp("published_at", True),
        sa.Column("lease_owner", sa.String(length=200), nullable=True),
        _stamp("lease_expires_at", True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("result", sa.JSON(), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        _stamp("finished_at", True),
        sa.CheckConstraint("kind IN ('sensitivity', 'robustness')", name=op.f("ck_analyses_kind")),
        sa.CheckConstraint(
            "status IN ('queued', 'running', 'done', 'failed')", name=op.f("ck_analyses_status")
        ),
        sa.ForeignKeyConstraint(
            ["request_id"],
            ["requests.id"],
            name=op.f("fk_analyses_request_id_requests"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_analyses")),
    )
    op.create_index(op.f("ix_analyses_request_id"), "analyses", ["request_id"], unique=False)
    op.add_column("requests", sa.Column("effect_source", sa.Text(), nullable=True))
    _chunk_kinds(_CHUNK_KINDS_NEW)


def downgrade() -> None:
    """Drop analyses (and their chunk rows) and requests.effect_source."""
    op.execute("DELETE FROM chunk_results WHERE job_kind = 'analysis'")
    _chunk_kinds(_CHUNK_KINDS_OLD)
    with op.batch_alter_table("requests") as batch:
        batch.drop_column("effect_source")
    op.drop_index(op.f("ix_analyses_request_id"), table_name="analyses")
    op.drop_table("analyses")
