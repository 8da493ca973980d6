"""The audit trail: append-only events linked by a SHA-256 hash chain.

Each event's ``sha256`` covers (prev_sha256, id, request_id, actor, action, canonical detail,
created_at ISO); changing or removing any stored event breaks every hash after it.
"""

from __future__ import annotations

from typing import TypeVar

from sqlalchemy import bindparam, select, text
from sqlalchemy.orm import Session

from .chain import chain_hash
from .chain import content_hash as content_hash  # re-exported: the store's callers use it
from .models import AuditEvent
from .types import utcnow
from .webhooks import enqueue_for_event

_Row = TypeVar("_Row")

# Any constant works; it names the one lock all appenders share on PostgreSQL.
_PG_LOCK_KEY = 7_341_020_001


def event_hash(event: AuditEvent) -> str:
    """Return the chain hash of ``event`` from its stored fields and its predecessor's hash."""
    return chain_hash(
        event.prev_sha256,
        event.id,
        event.request_id,
        event.actor,
        event.action,
        event.detail,
        event.created_at.isoformat(),
    )


_LOCK_HELD = "audit_chain_lock"


def _lock_chain(session: Session) -> None:
    """Serialise appenders so two transactions never link to the same predecessor (PostgreSQL).

    The lock lasts until the transaction ends, so a transaction that appends several events
    (a request answered at submission appends three) asks once. A lock taken inside a savepoint
    is released if the savepoint rolls back, so only one taken outside any savepoint is
    remembered, for the transaction it was taken in.
    """
    root = session.get_transaction()
    if root is not None and session.info.get(_LOCK_HELD) is root:
        return
    session.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": _PG_LOCK_KEY})
    if session.get_nested_transaction() is None:
        session.info[_LOCK_HELD] = session.get_transaction()


def append_event(
    session: Session, *, request_id: str | None, actor: str, action: str, detail: dict | None
) -> AuditEvent:
    """Append one event to the chain in the caller's transaction and return it."""
    if session.get_bind().dialect.name == "postgresql":
        _lock_chain(session)
    event = AuditEvent(
        request_id=request_id,
        actor=actor,
        action=action,
        detail=detail or {},
        created_at=utcnow(),
        sha256="",
    )
    session.add(event)
    # The insert takes SQLite's write lock and assigns the id, both needed before hashing.
    session.flush()
    prev = session.scalar(
        select(AuditEvent.sha256)
        .where(AuditEvent.id < event.id)
        .order_by(AuditEvent.id.desc())
        .limit(1)
    )
    event.prev_sha256 = prev
    event.sha256 = event_hash(event)
    session.flush()
    # A status change a client listens for writes its outbox row in this same transaction.
    enqueue_for_event(session, event)
    return event


def add_with_event(
    session: Session, row: _Row, *, request_id: str, actor: str, action: str, detail: dict
) -> _Row:
    """Insert ``row`` and append the audit event that records it, in the caller's transaction."""
    session.add(row)
    session.flush()  # the row exists before the event that names it
    append_event(session, request_id=request_id, actor=actor, action=action, detail=detail)
    return row


def events_for(session: Session, request_id: str) -> list[AuditEvent]:
    """Return a request's events, oldest first."""
    return list(session.scalars(_EVENTS_OF_REQUEST, {"request_id": request_id}))


# Built once: a request's history is read on every poll of it.
_EVENTS_OF_REQUEST = (
    select(AuditEvent)
    .where(AuditEvent.request_id == bindparam("request_id"))
    .order_by(AuditEvent.id)
)


def verify_chain(session: Session) -> list[int]:
    """Return the ids of events whose link or hash does not check out (empty when intact)."""
    broken: list[int] = []
    prev: str | None = None
    for event in session.scalars(select(AuditEvent).order_by(AuditEvent.id)):
        if event.prev_sha256 != prev or event.sha256 != event_hash(event):
            broken.append(event.id)
        prev = event.sha256
    return broken
