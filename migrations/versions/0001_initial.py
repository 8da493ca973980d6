"""initial: requests, results, reruns, chunk_results, audit_events

Revision ID: 0001
Revises:
Create Date: 2026-12-01

Written from autogenerate output and read by hand. Timestamps are timezone-aware; the models
read them through service.store.types.UTCDateTime, which is a plain DateTime(timezone=True) here.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0001"
down_revision: str | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

REQUEST_STATUSES = (
    "'received', 'queued', 'running', 'computed', 'approved', 'returned', 'failed', 'cancelled'"
)


def _stamp(name: str, nullable: bool) -> sa.Column:
    return sa.Column(name, sa.DateTime(timezone=True), nullable=nullable)


def upgrade() -> None:
    """Create every table of the first release."""
    op.create_table(
        "requests",
        sa.Column("id", sa.String(length=32), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("protocol", sa.JSON(), nullable=False),
        sa.Column("protocol_id", sa.String(length=64), nullable=False),
        sa.Column("requester", sa.JSON(), nullable=False),
        sa.Column("requester_name", sa.String(length=200), nullable=False),
        sa.Column("requester_email", sa.String(length=320), nullable=False),
        sa.Column("department", sa.String(length=200), nullable=True),
        sa.Column("deadline", sa.Date(), nullable=True),
        sa.Column("notes", sa.Text(), nullable=True),
        sa.Column("question_raw", sa.JSON(), nullable=False),
        sa.Column("question", sa.JSON(), nullable=False),
        sa.Column("design", sa.String(length=32), nullable=False),
        sa.Column("method", sa.String(length=16), nullable=False),
        sa.Column("seed", sa.BigInteger(), nullable=True),
        sa.Column("progress", sa.Double(), nullable=False),
        sa.Column("cancel_requested", sa.Boolean(), nullable=False),
        sa.Column("assigned_to", sa.String(length=200), nullable=True),
        sa.Column("idempotency_key", sa.String(length=200), nullable=True),
        sa.Column("body_sha256", sa.String(length=64), nullable=False),
        sa.Column("submitted_by", sa.String(length=200), nullable=False),
        _stamp("submitted_at", False),
        _stamp("updated_at", False),
        _stamp("published_at", True),
        sa.Column("lease_owner", sa.String(length=200), nullable=True),
        _stamp("lease_expires_at", True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("error", sa.Text(), nullable=True),
        sa.CheckConstraint(f"status IN ({REQUEST_STATUSES})", name=op.f("ck_requests_status")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_requests")),
        sa.UniqueConstraint("idempotency_key", name=op.f("uq_requests_idempotency_key")),
    )
    for column in ("status", "protocol_id", "requester_email", "design", "submitted_at"):
        op.create_index(op.f(f"ix_requests_{column}"), "requests", [column])

    op.create_table(
        "results",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("request_id", sa.String(length=32), nullable=False),
        sa.Column("record", sa.JSON(), nullable=False),
        sa.Column("record_sha256", sa.String(length=64), nullable=False),
        sa.Column("versions", sa.JSON(), nullable=False),
        sa.Column("chunk_size", sa.Integer(), nullable=True),
        _stamp("started_at", True),
        _stamp("finished_at", False),
        sa.Column("duration_seconds", sa.Double(), nullable=True),
        sa.Column("conflict", sa.JSON(), nullable=True),
        sa.ForeignKeyConstraint(
            ["request_id"], ["requests.id"], name=op.f("fk_results_request_id_requests")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_results")),
        sa.UniqueConstraint("request_id", name=op.f("uq_results_request_id")),
    )

    op.create_table(
        "reruns",
        sa.Column("id", sa.String(length=32), nullable=False),
        sa.Column("request_id", sa.String(length=32), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("requested_by", sa.String(length=200), nullable=False),
        _stamp("requested_at", False),
        _stamp("published_at", True),
        sa.Column("lease_owner", sa.String(length=200), nullable=True),
        _stamp("lease_expires_at", True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("record", sa.JSON(), nullable=True),
        sa.Column("record_sha256", sa.String(length=64), nullable=True),
        sa.Column("identical", sa.Boolean(), nullable=True),
        sa.Column("differences", sa.JSON(), nullable=True),
        sa.Column("env_original", sa.JSON(), nullable=False),
        sa.Column("env_rerun", sa.JSON(), nullable=True),
        _stamp("finished_at", True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.CheckConstraint(
            "status IN ('queued', 'running', 'done', 'failed')", name=op.f("ck_reruns_status")
        ),
        sa.ForeignKeyConstraint(
            ["request_id"], ["requests.id"], name=op.f("fk_reruns_request_id_requests")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_reruns")),
    )
    op.create_index(op.f("ix_reruns_request_id"), "reruns", ["request_id"])

    op.create_table(
        "chunk_results",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("job_kind", sa.String(length=16), nullable=False),
        sa.Column("job_id", sa.String(length=32), nullable=False),
        sa.Column("task_key", sa.String(length=64), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("lease_owner", sa.String(length=200), nullable=True),
        _stamp("lease_expires_at", True),
        sa.Column("result", sa.JSON(), nullable=True),
        _stamp("created_at", False),
        _stamp("finished_at", True),
        sa.CheckConstraint(
            "job_kind IN ('request', 'rerun')", name=op.f("ck_chunk_results_job_kind")
        ),
        sa.CheckConstraint("status IN ('running', 'done')", name=op.f("ck_chunk_results_status")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_chunk_results")),
        sa.UniqueConstraint("job_kind", "job_id", "task_key", name="uq_chunk_results_job_task"),
    )

    op.create_table(
        "audit_events",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("request_id", sa.String(length=32), nullable=True),
        sa.Column("actor", sa.String(length=200), nullable=False),
        sa.Column("action", sa.String(length=64), nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
        _stamp("created_at", False),
        sa.Column("prev_sha256", sa.String(length=64), nullable=True),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_audit_events")),
    )
    op.create_index(op.f("ix_audit_events_request_id"), "audit_events", ["request_id"])


def downgrade() -> None:
    """Drop every table (the audit trail too: only for throw-away databases)."""
    op.drop_table("audit_events")
    op.drop_table("chunk_results")
    op.drop_table("reruns")
    op.drop_table("results")
    op.drop_table("requests")
