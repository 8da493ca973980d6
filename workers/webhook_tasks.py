"""Webhook delivery: workers POST due outbox rows, signed per the Standard Webhooks convention.

A courier thread in every worker's main process (started on ``worker_ready``, like the sweeper)
looks for due messages every ``WEBHOOK_POLL_SECONDS``; the ``sizewise.deliver_webhooks`` task
runs the same round for deployments that schedule it. Each message is claimed by a conditional
update before it is sent, so two workers never send the same attempt; a worker that dies while
sending leaves a message that comes due again (the receiver dedupes on ``webhook-id``, which is
the same on every attempt). Failures are retried with exponential backoff up to
``WEBHOOK_ATTEMPTS``; each attempt is logged in ``webhook_attempts``.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
import time
import urllib.error
import urllib.request
import uuid
from dataclasses import dataclass
from datetime import UTC, datetime
from urllib.parse import urlsplit

from celery.signals import worker_ready, worker_shutdown

from service.store import webhooks as store
from service.store.db import session_scope
from workers.celery_app import app
from workers.sessions import sessions
from workers.sweeper import ROUND_LOCK, Periodic

log = logging.getLogger(__name__)

USER_AGENT = "sizewise-webhooks/1"
# What is kept of a receiver's answer: enough to tell a proxy's error page from the receiver's.
ERROR_MAX = 300


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    """A redirect is a failed attempt: the signed body goes only to the registered URL."""

    def redirect_request(self, req, fp, code, msg, headers, newurl):  # noqa: D102
        return None


def _opener(url: str) -> urllib.request.OpenerDirector:
    handlers: list = [_NoRedirect()]
    # An egress proxy from the environment serves remote receivers; a local one is reached directly.
    if store.is_loopback(urlsplit(url).hostname or ""):
        handlers.append(urllib.request.ProxyHandler({}))
    return urllib.request.build_opener(*handlers)


@dataclass(frozen=True)
class Answer:
    """How one attempt went."""

    status_code: int | None
    error: str | None
    duration_ms: float
    attempted_at: datetime


def headers_for(delivery: store.Delivery, timestamp: int) -> dict[str, str]:
    """The Standard Webhooks headers of one attempt (the timestamp is the attempt's own)."""
    return {
        "Content-Type": "application/json",
        "User-Agent": USER_AGENT,
        "webhook-id": delivery.message_id,
        "webhook-timestamp": str(timestamp),
        "webhook-signature": store.sign(
            delivery.secret, delivery.message_id, timestamp, delivery.payload
        ),
    }


def send(delivery: store.Delivery, timeout: float) -> Answer:
    """POST one message; any answer other than 2xx, and any network error, is a failure."""
    attempted_at = datetime.now(UTC)
    started = time.monotonic()
    request = urllib.request.Request(
        delivery.url,
        data=delivery.payload.encode("utf-8"),
        headers=headers_for(delivery, int(time.time())),
        method="POST",
    )
    code: int | None = None
    error: str | None = None
    try:
        with _opener(delivery.url).open(request, timeout=timeout) as reply:
            reply.read(65536)
            code = reply.status
    except urllib.error.HTTPError as exc:
        code = exc.code
        error = f"HTTP {exc.code} {exc.reason}"
        if 300 <= exc.code < 400:
            error += "; redirects are not followed, register the final URL"
        exc.close()
    except (urllib.error.URLError, OSError, ValueError) as exc:
        reason = getattr(exc, "reason", exc)
        error = f"no answer: {reason}"
    elapsed = (time.monotonic() - started) * 1000.0
    if error is not None:
        error = error[:ERROR_MAX]
    return Answer(code, error, elapsed, attempted_at)


def owner_name() -> str:
    """Who holds a claimed message: ``courier:<hostname>:<pid>:<random>``."""
    return f"courier:{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"


def deliver_one(config: dict, message_id: str, owner: str) -> str | None:
    """Claim, send and settle one message; return the outcome (None when not ours to send)."""
    factory = sessions(config)
    with session_scope(factory) as session:
        delivery = store.claim(session, message_id, owner, datetime.now(UTC))
    if delivery is None:
        return None
    answer = send(delivery, float(config.get("WEBHOOK_TIMEOUT_SECONDS", 10.0)))
    with session_scope(factory) as session:
        outcome = store.record_attempt(
            session,
            delivery,
            owner,
            status_code=answer.status_code,
            error=answer.error,
            duration_ms=answer.duration_ms,
            attempted_at=answer.attempted_at,
            max_attempts=int(config.get("WEBHOOK_ATTEMPTS", 8)),
            backoff_seconds=float(config.get("WEBHOOK_BACKOFF_SECONDS", 10.0)),
        )
    log.info(
        "webhook %s attempt %d to %s: %s (%s)",
        delivery.message_id,
        delivery.attempt,
        urlsplit(delivery.url).netloc,
        outcome,
        answer.status_code if answer.status_code is not None else answer.error,
    )
    return outcome


def deliver_due(config: dict, *, limit: int = 20) -> int:
    """Send every message due now (at most ``limit``); return how many attempts were made."""
    with session_scope(sessions(config)) as session:
        due = store.due_messages(session, datetime.now(UTC), limit)
    owner = owner_name()
    made = 0
    for message_id in due:
        # Held per message, never across a fork of a pool child (see workers.sweeper.ROUND_LOCK).
        with ROUND_LOCK:
            made += deliver_one(config, message_id, owner) is not None
    return made


@app.task(name="sizewise.deliver_webhooks", ignore_result=True)
def deliver_webhooks() -> int:
    """One delivery round, for deployments that schedule it (the courier thread does the same)."""
    return deliver_due(dict(app.conf.sizewise))


_COURIER = Periodic("sizewise-courier", deliver_due, "webhook delivery")


def start_courier(config: dict) -> threading.Thread:
    """Start the courier daemon thread (once per process) and return it."""
    return _COURIER.start(config, max(float(config.get("WEBHOOK_POLL_SECONDS", 1.0)), 0.05))


def stop_courier(timeout: float = 5.0) -> None:
    """Ask the courier thread to stop and wait briefly for it."""
    _COURIER.stop(timeout)


@worker_ready.connect
def _start_courier(sender=None, **_kwargs) -> None:
    start_courier(dict(app.conf.sizewise))


@worker_shutdown.connect
def _stop_courier(**_kwargs) -> None:
    stop_courier()
