"""webhooks: intake clients' callback URLs, the notification outbox and its delivery log

Revision ID: 0007_webhooks
Revises: 0006_desk_sessions
Create Date: 2026-12-02

Adds three tables. The previous release neither reads nor writes them, so it keeps working
against the upgraded schema (it only sends no notifications).
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0007_webhooks"
down_revision: str | None = "0006_desk_sessions"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_STAMP = sa.DateTime(timezone=True)


def upgrade() -> None:
    """Create webhooks, webhook_messages and webhook_attempts."""
    op.create_table(
        "webhooks",
        sa.Column("id", sa.String(length=32), nullable=False),
        sa.Column("token_id", sa.String(length=32), nullable=False),
        sa.Column("url", sa.String(length=2000), nullable=False),
        sa.Column("secret", sa.String(length=120), nullable=False),
        sa.Column("api_base", sa.String(length=500), nullable=False),
        sa.Column("created_at", _STAMP, nullable=False),
        sa.Column("updated_at", _STAMP, nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_webhooks")),
        sa.UniqueConstraint("token_id", name=op.f("uq_webhooks_token_id")),
    )
    op.create_table(
        "webhook_messages",
        sa.Column("id", sa.String(length=40), nullable=False),
        sa.Column("webhook_id", sa.String(length=32), nullable=False),
        sa.Column("request_id", sa.String(length=32), nullable=False),
        sa.Column("audit_event_id", sa.Integer(), nullable=False),
        sa.Column("event_type", sa.String(length=40), nullable=False),
        sa.Column("payload", sa.Text(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("next_attempt_at", _STAMP, nullable=False),
        sa.Column("lease_owner", sa.String(length=200), nullable=True),
        sa.Column("created_at", _STAMP, nullable=False),
        sa.Column("finished_at", _STAMP, nullable=True),
        sa.CheckConstraint(
            "status IN ('pending', 'delivered', 'failed', 'dropped')",
            name=op.f("ck_webhook_messages_status"),
        ),
        sa.ForeignKeyConstraint(
            ["request_id"],
            ["requests.id"],
            name=op.f("fk_webhook_messages_request_id_requests"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_webhook_messages")),
        sa.UniqueConstraint("audit_event_id", name=op.f("uq_webhook_messages_audit_event_id")),
    )
    op.create_index(
        op.f("ix_webhook_messages_request_id"), "webhook_messages", ["request_id"], unique=False
    )
    op.create_index(
        op.f("ix_webhook_messages_next_attempt_at"),
        "webhook_messages",
        ["next_attempt_at"],
        unique=False,
    )
    op.create_table(
        "webhook_attempts",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("message_id", sa.String(length=40), nullable=False),
        sa.Column("attempt", sa.Integer(), nullable=False),
        sa.Column("url", sa.String(length=2000), nullable=False),
        sa.Column("attempted_at", _STAMP, nullable=False),
        sa.Column("status_code", sa.Integer(), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("duration_ms", sa.Double(), nullable=False),
        sa.ForeignKeyConstraint(
            ["message_id"],
            ["webhook_messages.id"],
            name=op.f("fk_webhook_attempts_message_id_webhook_messages"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_webhook_attempts")),
    )
    op.create_index(
        op.f("ix_webhook_attempts_message_id"), "webhook_attempts", ["message_id"], unique=False
    )


def downgrade() -> None:
    """Drop the three webhook tables."""
    op.drop_index(op.f("ix_webhook_attempts_message_id"), table_name="webhook_attempts")
    op.drop_table("webhook_attempts")
    op.drop_index(op.f("ix_webhook_messages_next_attempt_at"), table_name="webhook_messages")
    op.drop_index(op.f("ix_webhook_messages_request_id"), table_name="webhook_messages")
    op.drop_table("webhook_messages")
    op.drop_table("webhooks")
