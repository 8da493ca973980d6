"""Webhooks: callback registration, the notification outbox and the delivery log.

A status change that a client is told about (computed, failed, returned, approved) appends an
audit event; ``enqueue_for_event`` (called by ``audit.append_event``) writes the outbox row in
that same transaction, so a notification exists exactly when the change was committed. Workers
claim due rows, POST them signed per the Standard Webhooks convention and record each attempt.
Functions take a session and never commit.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import ipaddress
import json
import secrets
import uuid
from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from .models import (
    WEBHOOK_EVENTS,
    AuditEvent,
    Request,
    Webhook,
    WebhookAttempt,
    WebhookMessage,
)
from .paging import Key, page_of_request
from .types import utcnow

SECRET_PREFIX = "whsec_"
MESSAGE_PREFIX = "msg_"
# A claimed message is due again after this long if its worker died mid-delivery.
CLAIM_SECONDS = 120
# Backoff grows by this factor per failed attempt (base x 4^(n-1)).
BACKOFF_FACTOR = 4
BACKOFF_CAP = timedelta(hours=12)
# Detail fields of the status event a client gets in the payload (the reviewer's note, the error).
_PAYLOAD_DETAIL = ("note", "error")


def new_secret() -> str:
    """A signing secret as Standard Webhooks writes it: ``whsec_`` + base64 of 32 random bytes."""
    return SECRET_PREFIX + base64.b64encode(secrets.token_bytes(32)).decode("ascii")


def secret_key(secret: str) -> bytes:
    """The HMAC key of a ``whsec_`` secret (the base64 part, decoded)."""
    return base64.b64decode(secret.removeprefix(SECRET_PREFIX))


def sign(secret: str, message_id: str, timestamp: int, body: str) -> str:
    """The ``webhook-signature`` value: ``v1,`` + base64 HMAC-SHA256 of ``id.timestamp.body``."""
    signed = f"{message_id}.{timestamp}.{body}".encode()
    digest = hmac.new(secret_key(secret), signed, hashlib.sha256).digest()
    return "v1," + base64.b64encode(digest).decode("ascii")


def is_loopback(host: str) -> bool:
    """True for ``localhost`` and loopback addresses (a local run's receiver)."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def get_webhook(session: Session, token_id: str) -> Webhook | None:
    """The callback registered by ``token_id``, if any."""
    return session.scalar(select(Webhook).where(Webhook.token_id == token_id))


def register(session: Session, token_id: str, url: str, api_base: str) -> tuple[Webhook, bool]:
    """Create or replace the token's callback with a fresh secret; return it and whether new."""
    row = get_webhook(session, token_id)
    created = row is None
    now = utcnow()
    if row is None:
        row = Webhook(id=uuid.uuid4().hex, token_id=token_id, created_at=now)
        session.add(row)
    row.url, row.api_base, row.updated_at = url, api_base, now
    # Registering again rotates the secret: it is shown once, in this answer only.
    row.secret = new_secret()
    session.flush()
    return row, created


def unregister(session: Session, token_id: str) -> bool:
    """Remove the token's callback; its undelivered messages are dropped. False if none."""
    row = get_webhook(session, token_id)
    if row is None:
        return False
    session.execute(
        update(WebhookMessage)
        .where(WebhookMessage.webhook_id == row.id, WebhookMessage.status == "pending")
        .values(status="dropped", finished_at=utcnow())
    )
    session.delete(row)
    session.flush()
    return True


def _payload(event: AuditEvent, request: Request, api_base: str) -> str:
    detail = event.detail or {}
    data = {
        "id": request.id,
        "status": event.action,
        "protocol_id": request.protocol_id,
        "event_id": event.id,
        "url": f"{api_base}/v1/requests/{request.id}",
        "report_url": f"{api_base}/v1/requests/{request.id}/report",
    }
    data.update({k: detail[k] for k in _PAYLOAD_DETAIL if detail.get(k) is not None})
    body = {
        "type": f"request.{event.action}",
        "timestamp": event.created_at.isoformat().replace("+00:00", "Z"),
        "data": data,
    }
    return json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def enqueue_for_event(session: Session, event: AuditEvent) -> WebhookMessage | None:
    """Write the outbox row of a status event a client is told about (None when nobody listens)."""
    if event.request_id is None or event.action not in WEBHOOK_EVENTS:
        return None
    # Only events that set the request's status (a rerun's failure names no status).
    if (event.detail or {}).get("status") != event.action:
        return None
    request = session.get(Request, event.request_id)
    if request is None:
        return None
    hook = get_webhook(session, request.submitted_by)
    if hook is None:
        return None
    message = WebhookMessage(
        id=MESSAGE_PREFIX + uuid.uuid4().hex,
        webhook_id=hook.id,
        request_id=request.id,
        audit_event_id=event.id,
        event_type=f"request.{event.action}",
        payload=_payload(event, request, hook.api_base),
        status="pending",
        attempts=0,
        next_attempt_at=event.created_at,
        created_at=event.created_at,
    )
    session.add(message)
    session.flush()
    return message


@dataclass(frozen=True)
class Delivery:
    """What a worker needs to send one claimed message (read in the claiming transaction)."""

    message_id: str
    attempt: int
    url: str
    secret: str
    payload: str


def due_messages(session: Session, now: datetime, limit: int = 20) -> list[str]:
    """Ids of pending messages whose next attempt is due, oldest first."""
    return list(
        session.scalars(
            select(WebhookMessage.id)
            .where(WebhookMessage.status == "pending", WebhookMessage.next_attempt_at <= now)
            .order_by(WebhookMessage.next_attempt_at, WebhookMessage.id)
            .limit(limit)
        )
    )


def claim(session: Session, message_id: str, owner: str, now: datetime) -> Delivery | None:
    """Take a due message for one attempt (a conditional update); None when another worker has it.

    The claim pushes the next attempt ``CLAIM_SECONDS`` ahead, so a worker that dies while
    sending leaves a message that comes due again. A message whose callback was removed is
    dropped here.
    """
    message = session.get(WebhookMessage, message_id, populate_existing=True)
    if message is None or message.status != "pending" or message.next_attempt_at > now:
        return None
    # Read before the update: synchronize_session refreshes ``message`` with the new count.
    attempt = message.attempts + 1
    taken = session.execute(
        update(WebhookMessage)
        .where(
            WebhookMessage.id == message_id,
            WebhookMessage.status == "pending",
            WebhookMessage.attempts == attempt - 1,
            WebhookMessage.next_attempt_at <= now,
        )
        .values(
            attempts=attempt,
            lease_owner=owner,
            next_attempt_at=now + timedelta(seconds=CLAIM_SECONDS),
        )
    ).rowcount
    if taken != 1:
        return None
    hook = session.get(Webhook, message.webhook_id)
    if hook is None:
        session.execute(
            update(WebhookMessage)
            .where(WebhookMessage.id == message_id)
            .values(status="dropped", finished_at=now, lease_owner=None)
        )
        return None
    return Delivery(message_id, attempt, hook.url, hook.secret, message.payload)


def backoff(attempt: int, base_seconds: float) -> timedelta:
    """Wait before the attempt after ``attempt`` failed: base x 4^(attempt-1), at most 12 h."""
    seconds = base_seconds * BACKOFF_FACTOR ** max(attempt - 1, 0)
    return min(timedelta(seconds=seconds), BACKOFF_CAP)


def record_attempt(
    session: Session,
    delivery: Delivery,
    owner: str,
    *,
    status_code: int | None,
    error: str | None,
    duration_ms: float,
    attempted_at: datetime,
    max_attempts: int,
    backoff_seconds: float,
) -> str:
    """Log the attempt and settle the message: 'delivered', 'retry' or 'failed' ('lost' if stale)."""
    now = utcnow()
    ok = status_code is not None and 200 <= status_code < 300
    if ok:
        values: dict = {"status": "delivered", "finished_at": now}
        outcome = "delivered"
    elif delivery.attempt >= max_attempts:
        values = {"status": "failed", "finished_at": now}
        outcome = "failed"
    else:
        values = {"next_attempt_at": now + backoff(delivery.attempt, backoff_seconds)}
        outcome = "retry"
    session.add(
        WebhookAttempt(
            message_id=delivery.message_id,
            attempt=delivery.attempt,
            url=delivery.url,
            attempted_at=attempted_at,
            status_code=status_code,
            error=error,
            duration_ms=duration_ms,
        )
    )
    settled = session.execute(
        update(WebhookMessage)
        .where(
            WebhookMessage.id == delivery.message_id,
            WebhookMessage.status == "pending",
            WebhookMessage.lease_owner == owner,
            WebhookMessage.attempts == delivery.attempt,
        )
        .values(lease_owner=None, **values)
    ).rowcount
    session.flush()
    return outcome if settled == 1 else "lost"


def deliveries_for(
    session: Session, request_id: str, *, after: Key | None = None, limit: int = 100
) -> tuple[list[dict], Key | None]:
    """One page of the request's messages, oldest first, each with its attempts (the log)."""
    messages, next_key = page_of_request(
        session, WebhookMessage, WebhookMessage.created_at, request_id, after=after, limit=limit
    )
    attempts: dict[str, list[WebhookAttempt]] = {m.id: [] for m in messages}
    if messages:
        for row in session.scalars(
            select(WebhookAttempt)
            .where(WebhookAttempt.message_id.in_(list(attempts)))
            .order_by(WebhookAttempt.attempt, WebhookAttempt.id)
        ):
            attempts[row.message_id].append(row)
    items = [
        {
            "id": m.id,
            "type": m.event_type,
            "status": m.status,
            "created_at": m.created_at,
            "next_attempt_at": m.next_attempt_at if m.status == "pending" else None,
            "finished_at": m.finished_at,
            "attempts": [
                {
                    "attempt": a.attempt,
                    "url": a.url,
                    "at": a.attempted_at,
                    "status_code": a.status_code,
                    "error": a.error,
                    "duration_ms": a.duration_ms,
                }
                for a in attempts[m.id]
            ],
        }
        for m in messages
    ]
    return items, next_key
