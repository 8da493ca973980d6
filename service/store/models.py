"""SQLAlchemy 2 typed models: requests, results, reruns, explorations, chunk_results, audit_events, api_tokens.

Table and column names are a contract with the workers (see the shared service contract). Some
keep the words of the first version (table ``analyses``, its column ``kind`` holding
'sensitivity' / 'robustness', ``chunk_results.job_kind`` 'analysis', ``requests.design``):
renaming stored names would need a migration that changes nothing else, so the code maps them
here, in one place, and every API, record and report word is the new one.
"""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Any

from sqlalchemy import (
    JSON,
    BigInteger,
    CheckConstraint,
    Double,
    ForeignKey,
    Integer,
    MetaData,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

from .types import UTCDateTime, utcnow

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

REQUEST_STATUSES = (
    "received",
    "queued",
    "running",
    "computed",
    "approved",
    "returned",
    "failed",
    "cancelled",
)
RERUN_STATUSES = ("queued", "running", "done", "failed")
# Exploration type (the API's word) -> the value stored in ``analyses.kind`` (and token_spend.kind).
EXPLORATION_TYPES = {"sensitivity_grid": "sensitivity", "robustness_panel": "robustness"}
STORED_EXPLORATION_KINDS = tuple(EXPLORATION_TYPES.values())
EXPLORATION_STATUSES = ("queued", "running", "done", "failed")
# Jobs whose simulation chunks are shared through chunk_results, as stored in its job_kind column.
CHUNK_JOB_KINDS = ("request", "rerun", "analysis")
# Who may do what is decided in service/api/auth.py; the store only keeps the names.
TOKEN_ROLES = ("intake", "statistician", "auditor", "admin")
# Statuses after which a request no longer changes on its own.
ENDED_STATUSES = ("computed", "approved", "returned", "failed", "cancelled")

Json = Annotated[Any, mapped_column(JSON)]
Stamp = Annotated[datetime, mapped_column(UTCDateTime())]


def _in(column: str, values: tuple[str, ...]) -> str:
    return f"{column} IN ({', '.join(repr(v) for v in values)})"


class Base(DeclarativeBase):
    """Declarative base carrying the naming convention, so constraints have stable names."""

    metadata = MetaData(naming_convention=NAMING_CONVENTION)
    type_annotation_map = {datetime: UTCDateTime(), dict[str, Any]: JSON, Any: JSON}


class Leased:
    """The columns of a job row a worker claims: the outbox marker and the lease (jobs.py)."""

    published_at: Mapped[datetime | None]
    lease_owner: Mapped[str | None] = mapped_column(String(200))
    lease_expires_at: Mapped[datetime | None]
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    # The HTTP request id (X-Request-Id) of the call that created the job: a republished
    # message carries it again, so the worker's log lines join the API's.
    trace_id: Mapped[str | None] = mapped_column(String(64))


class Request(Leased, Base):
    """A sample-size question submitted for a study protocol, and its progress."""

    __tablename__ = "requests"
    __table_args__ = (CheckConstraint(_in("status", REQUEST_STATUSES), name="status"),)

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    status: Mapped[str] = mapped_column(String(16), index=True)
    protocol: Mapped[Json]
    protocol_id: Mapped[str] = mapped_column(String(64), index=True)
    requester: Mapped[Json]
    requester_name: Mapped[str] = mapped_column(String(200))
    requester_email: Mapped[str] = mapped_column(String(320), index=True)
    department: Mapped[str | None] = mapped_column(String(200))
    deadline: Mapped[date | None]
    notes: Mapped[str | None] = mapped_column(Text)
    question_raw: Mapped[Json]
    question: Mapped[Json]
    design: Mapped[str] = mapped_column(String(32), index=True)
    method: Mapped[str] = mapped_column(String(16))
    seed: Mapped[int | None] = mapped_column(BigInteger)
    progress: Mapped[float] = mapped_column(Double, default=0.0)
    cancel_requested: Mapped[bool] = mapped_column(default=False)
    assigned_to: Mapped[str | None] = mapped_column(String(200))
    idempotency_key: Mapped[str | None] = mapped_column(String(200), unique=True)
    body_sha256: Mapped[str] = mapped_column(String(64))
    submitted_by: Mapped[str] = mapped_column(String(200))
    submitted_at: Mapped[Stamp] = mapped_column(default=utcnow, index=True)
    updated_at: Mapped[Stamp] = mapped_column(default=utcnow)
    error: Mapped[str | None] = mapped_column(Text)
    effect_source: Mapped[str | None] = mapped_column(Text)


class Result(Base):
    """The original engine record of a request (at most one per request)."""

    __tablename__ = "results"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    request_id: Mapped[str] = mapped_column(ForeignKey("requests.id"), unique=True)
    record: Mapped[Json]
    record_sha256: Mapped[str] = mapped_column(String(64))
    versions: Mapped[Json]
    chunk_size: Mapped[int | None]
    started_at: Mapped[datetime | None]
    finished_at: Mapped[Stamp] = mapped_column(default=utcnow)
    duration_seconds: Mapped[float | None] = mapped_column(Double)
    conflict: Mapped[Any | None] = mapped_column(JSON)


class Rerun(Leased, Base):
    """A recomputation of a stored question, compared with the original record."""

    __tablename__ = "reruns"
    __table_args__ = (CheckConstraint(_in("status", RERUN_STATUSES), name="status"),)

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    request_id: Mapped[str] = mapped_column(ForeignKey("requests.id"), index=True)
    status: Mapped[str] = mapped_column(String(16))
    requested_by: Mapped[str] = mapped_column(String(200))
    requested_at: Mapped[Stamp] = mapped_column(default=utcnow)
    record: Mapped[Any | None] = mapped_column(JSON)
    record_sha256: Mapped[str | None] = mapped_column(String(64))
    identical: Mapped[bool | None]
    differences: Mapped[Any | None] = mapped_column(JSON)
    env_original: Mapped[Json]
    env_rerun: Mapped[Any | None] = mapped_column(JSON)
    finished_at: Mapped[datetime | None]
    error: Mapped[str | None] = mapped_column(Text)


class Exploration(Leased, Base):
    """A follow-up of a computed request (sensitivity grid or robustness panel), run as a job."""

    __tablename__ = "analyses"  # the first version's name, kept (see the module docstring)
    __table_args__ = (
        CheckConstraint(_in("kind", STORED_EXPLORATION_KINDS), name="kind"),
        CheckConstraint(_in("status", EXPLORATION_STATUSES), name="status"),
    )

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    # An exploration means nothing without its request, so it goes when the request goes.
    request_id: Mapped[str] = mapped_column(
        ForeignKey("requests.id", ondelete="CASCADE"), index=True
    )
    stored_kind: Mapped[str] = mapped_column("kind", String(16))
    params: Mapped[Json]
    status: Mapped[str] = mapped_column(String(16))
    requested_by: Mapped[str] = mapped_column(String(200))
    created_at: Mapped[Stamp] = mapped_column(default=utcnow)
    result: Mapped[Any | None] = mapped_column(JSON)
    error: Mapped[str | None] = mapped_column(Text)
    finished_at: Mapped[datetime | None]

    @property
    def type(self) -> str:
        """The exploration type the API names: 'sensitivity_grid' or 'robustness_panel'."""
        return exploration_type(self.stored_kind)


def exploration_type(stored_kind: str) -> str:
    """The API's exploration type for a value of ``analyses.kind``."""
    for name, stored in EXPLORATION_TYPES.items():
        if stored == stored_kind:
            return name
    raise ValueError(f"unknown stored exploration kind {stored_kind!r}")


class ChunkResult(Base):
    """One unit of a split simulation batch (several engine chunks), claimed by any worker.

    ``tasks`` holds the unit's chunk tasks and ``result`` their results, in the same order.
    A retried job reuses finished units; the rows are deleted when the job ends.
    """

    __tablename__ = "chunk_results"
    __table_args__ = (
        UniqueConstraint("job_kind", "job_id", "task_key", name="uq_chunk_results_job_task"),
        CheckConstraint(_in("job_kind", CHUNK_JOB_KINDS), name="job_kind"),
        CheckConstraint(_in("status", ("pending", "running", "done")), name="status"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    job_kind: Mapped[str] = mapped_column(String(16))
    job_id: Mapped[str] = mapped_column(String(32))
    task_key: Mapped[str] = mapped_column(String(64))
    status: Mapped[str] = mapped_column(String(16))
    lease_owner: Mapped[str | None] = mapped_column(String(200))
    lease_expires_at: Mapped[datetime | None]
    tasks: Mapped[Any | None] = mapped_column(JSON)
    result: Mapped[Any | None] = mapped_column(JSON)
    created_at: Mapped[Stamp] = mapped_column(default=utcnow)
    finished_at: Mapped[datetime | None]


class AuditEvent(Base):
    """An append-only, hash-chained record of who changed what (never updated or deleted)."""

    __tablename__ = "audit_events"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    request_id: Mapped[str | None] = mapped_column(String(32), index=True)
    actor: Mapped[str] = mapped_column(String(200))
    action: Mapped[str] = mapped_column(String(64))
    detail: Mapped[Json]
    created_at: Mapped[Stamp] = mapped_column(default=utcnow)
    prev_sha256: Mapped[str | None] = mapped_column(String(64))
    sha256: Mapped[str] = mapped_column(String(64))


class ApiToken(Base):
    """A bearer token of the API: only the SHA-256 of its secret is kept, never the secret."""

    __tablename__ = "api_tokens"
    __table_args__ = (CheckConstraint(_in("role", TOKEN_ROLES), name="role"),)

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    secret_sha256: Mapped[str] = mapped_column(String(64), unique=True)
    role: Mapped[str] = mapped_column(String(16))
    name: Mapped[str] = mapped_column(String(120))
    created_at: Mapped[Stamp] = mapped_column(default=utcnow)
    last_used_at: Mapped[datetime | None]
    revoked_at: Mapped[datetime | None]


SPEND_KINDS = ("request", "rerun", "sensitivity", "robustness")


class TokenSpend(Base):
    """The estimated random draws one token caused: one row per simulation it set going.

    A row is written in the same transaction as the request, rerun or exploration it pays for, after
    the token's row is locked, so the hourly budget is checked and reserved in one step.
    """

    __tablename__ = "token_spend"
    __table_args__ = (CheckConstraint(_in("kind", SPEND_KINDS), name="kind"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    token_id: Mapped[str] = mapped_column(String(32), index=True)
    kind: Mapped[str] = mapped_column(String(16))
    subject_id: Mapped[str] = mapped_column(String(32))
    cost: Mapped[int] = mapped_column(BigInteger)
    spent_at: Mapped[Stamp] = mapped_column(default=utcnow, index=True)


class DeskSession(Base):
    """A browser session of the desk: the cookie holds a random secret, the row its SHA-256.

    The row names the token that signed in (never its secret); every page checks that token
    again, the idle time since ``last_seen_at``, and ``ended_at`` (sign-out, expiry, revocation).
    """

    __tablename__ = "desk_sessions"

    id: Mapped[str] = mapped_column(String(64), primary_key=True)
    token_id: Mapped[str] = mapped_column(ForeignKey("api_tokens.id"), index=True)
    created_at: Mapped[Stamp] = mapped_column(default=utcnow)
    last_seen_at: Mapped[Stamp] = mapped_column(default=utcnow)
    ended_at: Mapped[datetime | None]
    end_reason: Mapped[str | None] = mapped_column(String(16))


# --- webhooks (issue 15): callbacks of intake clients, their outbox and delivery log ----------

WEBHOOK_EVENTS = ("computed", "failed", "returned", "approved")
MESSAGE_STATUSES = ("pending", "delivered", "failed", "dropped")


class Webhook(Base):
    """One token's callback URL. The signing secret is symmetric, so it is kept (unlike tokens)."""

    __tablename__ = "webhooks"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    token_id: Mapped[str] = mapped_column(String(32), unique=True)
    url: Mapped[str] = mapped_column(String(2000))
    secret: Mapped[str] = mapped_column(String(120))
    # Where links in the payloads point (SIZEWISE_PUBLIC_URL, else the host that registered).
    api_base: Mapped[str] = mapped_column(String(500))
    created_at: Mapped[Stamp] = mapped_column(default=utcnow)
    updated_at: Mapped[Stamp] = mapped_column(default=utcnow)


class WebhookMessage(Base):
    """An outbox row: one notification, written in the transaction of the status change."""

    __tablename__ = "webhook_messages"
    __table_args__ = (CheckConstraint(_in("status", MESSAGE_STATUSES), name="status"),)

    # The Standard Webhooks message id (webhook-id header), the same on every attempt.
    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    webhook_id: Mapped[str] = mapped_column(String(32))
    request_id: Mapped[str] = mapped_column(ForeignKey("requests.id"), index=True)
    # One message per audit event: a status change never notifies twice.
    audit_event_id: Mapped[int] = mapped_column(Integer, unique=True)
    event_type: Mapped[str] = mapped_column(String(40))
    payload: Mapped[str] = mapped_column(Text)
    status: Mapped[str] = mapped_column(String(16))
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    next_attempt_at: Mapped[datetime] = mapped_column(index=True)
    lease_owner: Mapped[str | None] = mapped_column(String(200))
    created_at: Mapped[Stamp] = mapped_column(default=utcnow)
    finished_at: Mapped[datetime | None]


class WebhookAttempt(Base):
    """One delivery attempt of a message: the delivery log a client reads."""

    __tablename__ = "webhook_attempts"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    message_id: Mapped[str] = mapped_column(ForeignKey("webhook_messages.id"), index=True)
    attempt: Mapped[int] = mapped_column(Integer)
    url: Mapped[str] = mapped_column(String(2000))
    attempted_at: Mapped[Stamp] = mapped_column(default=utcnow)
    status_code: Mapped[int | None]
    error: Mapped[str | None] = mapped_column(Text)
    duration_ms: Mapped[float] = mapped_column(Double)
