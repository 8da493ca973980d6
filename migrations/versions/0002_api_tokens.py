"""api_tokens: bearer tokens (hashed), their role and their use

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-08

Only adds a table, so the previous release keeps working against an upgraded database.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Create the api_tokens table."""
    op.create_table(
        "api_tokens",
        sa.Column("id", sa.String(length=32), nullable=False),
        sa.Column("secret_sha256", sa.String(length=64), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("name", sa.String(length=120), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("last_used_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.CheckConstraint(
            "role IN ('intake', 'statistician', 'auditor', 'admin')",
            name=op.f("ck_api_tokens_role"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_api_tokens")),
        sa.UniqueConstraint("secret_sha256", name=op.f("uq_api_tokens_secret_sha256")),
    )


def downgrade() -> None:
    """Drop the api_tokens table (every token stops working)."""
    op.drop_table("api_tokens")
