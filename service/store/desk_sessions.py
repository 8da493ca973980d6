"""Data functions for the desk's browser sessions (take a session, never commit).

The browser's cookie carries a random secret; the table keeps only its SHA-256, so a leaked
database opens no session. A session ends by sign-out, by idling past the limit, or when its
token is revoked; an ended row never opens again, and the sweeper deletes it once ``KEEP`` has
passed since the idle limit (:func:`purge`).
"""

from __future__ import annotations

import hashlib
import secrets
from datetime import datetime, timedelta

from sqlalchemy import delete, update
from sqlalchemy.orm import Session

from .models import DeskSession
from .types import utcnow

END_REASONS = ("signed_out", "idle", "revoked")
# How long a row outlives the idle limit: a browser that comes back within it is told why its
# session ended ("signed out", "idle", "revoked") rather than only asked to sign in.
KEEP = timedelta(days=1)


def idle_limit(config: dict) -> timedelta:
    """How long a desk session may go unused (``DESK_IDLE_MINUTES``)."""
    return timedelta(minutes=int(config["DESK_IDLE_MINUTES"]))


def _digest(secret: str) -> str:
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


def open_session(session: Session, token_id: str) -> str:
    """Store a new desk session of ``token_id`` and return its secret (the cookie's value)."""
    secret = secrets.token_urlsafe(32)
    now = utcnow()
    session.add(
        DeskSession(id=_digest(secret), token_id=token_id, created_at=now, last_seen_at=now)
    )
    session.flush()
    return secret


def live_session(
    session: Session, secret: str, idle: timedelta
) -> tuple[DeskSession | None, str | None]:
    """Return ``(row, None)`` for a live session (its last use noted), else ``(row, reason)``.

    ``reason`` is why it no longer opens: ``unknown``, or the end reason; a session idle longer
    than ``idle`` is ended here as ``idle``.
    """
    row = session.get(DeskSession, _digest(secret)) if isinstance(secret, str) else None
    if row is None:
        return None, "unknown"
    if row.ended_at is not None:
        return row, row.end_reason or "signed_out"
    now = utcnow()
    if now - row.last_seen_at > idle:
        end_session(session, row, "idle")
        return row, "idle"
    row.last_seen_at = now
    session.flush()
    return row, None


def end_session(session: Session, row: DeskSession, reason: str) -> None:
    """End the session (once: a later reason does not replace the first)."""
    if reason not in END_REASONS:
        raise ValueError(f"reason must be one of {', '.join(END_REASONS)}; got {reason!r}")
    if row.ended_at is None:
        row.ended_at = utcnow()
        row.end_reason = reason
        session.flush()


def end_sessions_of(session: Session, token_id: str) -> int:
    """End every live session of a revoked token; return how many."""
    result = session.execute(
        update(DeskSession)
        .where(DeskSession.token_id == token_id, DeskSession.ended_at.is_(None))
        .values(ended_at=utcnow(), end_reason="revoked")
    )
    return int(result.rowcount or 0)


def purge(session: Session, now: datetime, idle: timedelta) -> int:
    """Delete the sessions unused for longer than ``idle`` + ``KEEP``; return how many.

    Every such session has ended (by idling, if nothing ended it before), so none is usable.
    """
    cutoff = now - idle - KEEP
    result = session.execute(delete(DeskSession).where(DeskSession.last_seen_at < cutoff))
    return int(result.rowcount or 0)
