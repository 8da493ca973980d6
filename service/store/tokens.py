"""Data functions for API tokens (take a session, never commit).

A token's secret is ``sw_`` + 43 URL-safe characters (32 random bytes). It is returned once, by
``create_token``; the database keeps only its SHA-256, so a leaked database yields no usable token.
"""

from __future__ import annotations

import hashlib
import math
import secrets
import uuid
from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import select
from sqlalchemy.orm import Session

from .audit import append_event
from .desk_sessions import end_sessions_of
from .models import TOKEN_ROLES, ApiToken, TokenSpend
from .types import utcnow

TOKEN_PREFIX = "sw_"
NAME_MAX = 120
# The part of check_name's "printable" rule a JSON Schema pattern can say (ECMA-262 without the
# u flag names no Unicode categories): no control character at all (tab and newline included)
# and at least one character that is not white space.
_NAME_CHAR = r"[^\x00-\x1f\x7f-\x9f]"
NAME_PATTERN = rf"^{_NAME_CHAR}*[^\s\x00-\x1f\x7f-\x9f]{_NAME_CHAR}*$"
DEMO_TOKEN_NAME = "demo statistician"
# last_used_at is a hint for admins, not a log: writing it at most once a minute keeps a busy
# token from turning every read into a write (SQLite has a single writer).
LAST_USED_RESOLUTION = timedelta(minutes=1)


class TokenInputError(ValueError):
    """A role or name the token store refuses; the message names the field and the value."""

    def __init__(self, field: str, message: str):
        self.field = field
        self.message = message  # without the field's name, for an error keyed by the field
        super().__init__(f"{field}: {message}")


def hash_secret(secret: str) -> str:
    """Return the hex SHA-256 of a token secret (the only form the database stores)."""
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


def check_role(role: str) -> str:
    """Return ``role`` when it is a known role; raise TokenInputError naming the allowed ones."""
    if role not in TOKEN_ROLES:
        raise TokenInputError("role", f"must be one of {', '.join(TOKEN_ROLES)}; got {role!r}")
    return role


def check_name(name: str) -> str:
    """Return the stripped name when it is 1-120 printable characters; else TokenInputError."""
    value = name.strip() if isinstance(name, str) else ""
    if not value or len(value) > NAME_MAX or not value.isprintable():
        raise TokenInputError(
            "name", f"must be 1-{NAME_MAX} printable characters; got {name!r:.60}"
        )
    return value


def _token_event(session: Session, row: ApiToken, action: str, actor: str) -> None:
    # The event holds what the row must keep saying: role and secret hash (audit verify checks).
    append_event(
        session,
        request_id=None,
        actor=actor,
        action=action,
        detail={
            "token_id": row.id,
            "role": row.role,
            "name": row.name,
            "secret_sha256": row.secret_sha256,
        },
    )


def create_token(
    session: Session, role: str, name: str, *, actor: str = "system"
) -> tuple[str, str]:
    """Store a new token of ``role`` and return ``(token_id, secret)``; the secret is not kept.

    A 'token_created' audit event records the role and the secret's hash; ``actor`` is who issued
    the token (an admin token's id, or 'cli' for the command line).
    """
    check_role(role)
    name = check_name(name)
    secret = TOKEN_PREFIX + secrets.token_urlsafe(32)
    row = ApiToken(
        id=uuid.uuid4().hex,
        secret_sha256=hash_secret(secret),
        role=role,
        name=name,
        created_at=utcnow(),
    )
    session.add(row)
    session.flush()
    _token_event(session, row, "token_created", actor)
    return row.id, secret


def verify_token(session: Session, secret: str) -> ApiToken | None:
    """Return the active token whose secret is ``secret`` (and note its use), else None."""
    if not isinstance(secret, str) or not secret.startswith(TOKEN_PREFIX) or len(secret) > 200:
        return None
    # Looking up the hash (not the secret) keeps the comparison off the secret itself.
    return verify_digest(session, hash_secret(secret))


def verify_digest(session: Session, digest: str) -> ApiToken | None:
    """Return the active token whose secret hashes to ``digest`` (and note its use), else None.

    The desk's sessions hold no secret, only their token; they are checked through this lookup.
    """
    row = session.scalar(select(ApiToken).where(ApiToken.secret_sha256 == digest))
    if row is None or row.revoked_at is not None:
        return None
    now = utcnow()
    if row.last_used_at is None or now - row.last_used_at >= LAST_USED_RESOLUTION:
        row.last_used_at = now
        session.flush()
    return row


def get_token(session: Session, token_id: str) -> ApiToken | None:
    """Return the token with ``token_id`` or None."""
    return session.get(ApiToken, token_id)


def revoke_token(session: Session, token_id: str, *, actor: str = "system") -> ApiToken | None:
    """Revoke the token (idempotent: the first revocation time is kept); None if unknown."""
    row = session.get(ApiToken, token_id)
    if row is None:
        return None
    if row.revoked_at is None:
        row.revoked_at = utcnow()
        session.flush()
        _token_event(session, row, "token_revoked", actor)
        end_sessions_of(session, token_id)  # its desk sessions end with it
    return row


def list_tokens(session: Session) -> list[ApiToken]:
    """Return every token, oldest first (revoked ones included)."""
    return list(session.scalars(select(ApiToken).order_by(ApiToken.created_at, ApiToken.id)))


@dataclass(frozen=True)
class DemoToken:
    """The local demo's statistician token: its secret, whether it was kept, what was revoked."""

    secret: str
    kept: bool
    revoked: tuple[str, ...] = ()


def ensure_demo_token(session: Session, kept_secret: str | None = None) -> DemoToken:
    """Keep the demo token whose secret the launcher saved, or issue a new one.

    A restart keeps the token a user may have exported. A secret cannot be shown twice, so when
    the saved one is gone (or no longer active) a new token is issued, and earlier active demo
    tokens, whose secrets nobody can print any more, are revoked: ``revoked`` lists them so the
    launcher can say so.
    """
    if kept_secret:
        row = session.scalar(
            select(ApiToken).where(ApiToken.secret_sha256 == hash_secret(kept_secret))
        )
        if row is not None and row.revoked_at is None and row.name == DEMO_TOKEN_NAME:
            return DemoToken(kept_secret, kept=True)
    revoked = []
    for row in session.scalars(
        select(ApiToken).where(ApiToken.name == DEMO_TOKEN_NAME, ApiToken.revoked_at.is_(None))
    ):
        revoke_token(session, row.id, actor="demo launcher")
        revoked.append(row.id)
    _token_id, secret = create_token(
        session, "statistician", DEMO_TOKEN_NAME, actor="demo launcher"
    )
    return DemoToken(secret, kept=False, revoked=tuple(revoked))


class BudgetRefused(Exception):
    """The token's hourly budget has no room for ``estimate``; nothing was reserved."""

    def __init__(self, estimate: int, remaining: int, budget: int, retry_after: int):
        super().__init__(f"estimate {estimate} > remaining {remaining} of {budget}")
        self.estimate = estimate
        self.remaining = remaining
        self.budget = budget
        self.retry_after = retry_after


def reserve_spend(
    session: Session,
    token_id: str,
    items: list[tuple[str, str, int]],
    *,
    budget: int,
    window: timedelta,
    now: datetime | None = None,
) -> int:
    """Record ``(kind, subject_id, cost)`` items against the token if its window has room.

    One step for concurrent callers: the token's row is locked (PostgreSQL: FOR UPDATE; SQLite:
    the ledger insert takes the database's single write lock) before the window is summed, so
    two submissions cannot both see the same room. Raises BudgetRefused (the caller's transaction
    must then roll back); returns the total reserved.
    """
    items = [(kind, subject, int(cost)) for kind, subject, cost in items if cost > 0]
    estimate = sum(cost for _kind, _subject, cost in items)
    if not items:
        return 0
    now = now or utcnow()
    session.execute(select(ApiToken.id).where(ApiToken.id == token_id).with_for_update())
    rows = [
        TokenSpend(token_id=token_id, kind=kind, subject_id=subject, cost=cost, spent_at=now)
        for kind, subject, cost in items
    ]
    session.add_all(rows)
    # On SQLite this flush takes the single write lock, so the window is read after it.
    session.flush()
    ours = {row.id for row in rows}
    window_rows = session.execute(
        select(TokenSpend.id, TokenSpend.spent_at, TokenSpend.cost)
        .where(TokenSpend.token_id == token_id, TokenSpend.spent_at >= now - window)
        .order_by(TokenSpend.spent_at, TokenSpend.id)
    ).all()
    earlier = [(at, cost) for row_id, at, cost in window_rows if row_id not in ours]
    spent = sum(cost for _at, cost in earlier)
    if spent + estimate <= budget:
        return estimate
    raise BudgetRefused(
        estimate,
        max(budget - spent, 0),
        budget,
        _seconds_until_room(earlier, spent, estimate, budget, now, window),
    )


def _seconds_until_room(earlier, spent: int, estimate: int, budget: int, now, window) -> int:
    """Seconds until enough of the window's spending ages out for ``estimate`` to fit."""
    for at, cost in earlier:
        spent -= cost
        if budget - spent >= estimate:
            return max(1, math.ceil((at + window - now).total_seconds()))
    return int(window.total_seconds())
