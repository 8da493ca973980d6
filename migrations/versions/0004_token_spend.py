"""token_spend: the estimated draws each token caused, for the hourly budget

Revision ID: 0004_token_spend
Revises: 0003
Create Date: 2026-12-02

Adds one table. The previous release neither reads nor writes it, so it keeps working against
the upgraded schema (its budget check reads requests only).
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0004_token_spend"
down_revision: str | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Create token_spend."""
    op.create_table(
        "token_spend",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("token_id", sa.String(length=32), nullable=False),
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("subject_id", sa.String(length=32), nullable=False),
        sa.Column("cost", sa.BigInteger(), nullable=False),
        sa.Column("spent_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint(
            "kind IN ('request', 'rerun', 'sensitivity', 'robustness')",
            name=op.f("ck_token_spend_kind"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_token_spend")),
    )
    op.create_index(op.f("ix_token_spend_token_id"), "token_spend", ["token_id"], unique=False)
    op.create_index(op.f("ix_token_spend_spent_at"), "token_spend", ["spent_at"], unique=False)


def downgrade() -> None:
    """Drop token_spend."""
    op.drop_index(op.f("ix_token_spend_spent_at"), table_name="token_spend")
    op.drop_index(op.f("ix_token_spend_token_id"), table_name="token_spend")
    op.drop_table("token_spend")
