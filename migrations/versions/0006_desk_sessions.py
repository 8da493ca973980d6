"""desk_sessions: the browser sessions of the desk (signed in with a token)

Revision ID: 0006_desk_sessions
Revises: 0005_work_units
Create Date: 2026-12-02

Adds one table. The previous release neither reads nor writes it.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0006_desk_sessions"
down_revision: str | None = "0005_work_units"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Create desk_sessions."""
    op.create_table(
        "desk_sessions",
        sa.Column("id", sa.String(length=64), nullable=False),
        sa.Column("token_id", sa.String(length=32), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("last_seen_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("ended_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("end_reason", sa.String(length=16), nullable=True),
        sa.ForeignKeyConstraint(
            ["token_id"],
            ["api_tokens.id"],
            name=op.f("fk_desk_sessions_token_id_api_tokens"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_desk_sessions")),
    )
    op.create_index(op.f("ix_desk_sessions_token_id"), "desk_sessions", ["token_id"], unique=False)


def downgrade() -> None:
    """Drop desk_sessions."""
    op.drop_index(op.f("ix_desk_sessions_token_id"), table_name="desk_sessions")
    op.drop_table("desk_sessions")
