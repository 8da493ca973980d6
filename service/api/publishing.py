"""Hand a committed job to the queue, or answer a closed-form question here and now.

A publish failure only delays a job (the sweeper publishes later). A closed-form question costs
milliseconds, so the API answers it itself with the worker's own steps (same claim, audit events
and sealed record), in the transaction that stores the request; only simulations and
explorations go through the broker.
"""

from __future__ import annotations

import logging
import os
import socket
import uuid

from .context import sessions, settings

log = logging.getLogger(__name__)


def publish_job(kind: str, job_id: str) -> bool:
    """Publish the job's task after the commit and mark it published; False leaves it for later."""
    return _queued(
        f"{kind} {job_id}",
        lambda queue: queue.publish_and_mark(kind, job_id, settings(), sessions()),
    )


def publish_explorations(ids: list[str]) -> None:
    """Publish the explorations that waited for a result just committed (else the sweeper does)."""
    if ids:
        _queued(
            "exploration " + ", ".join(ids),
            lambda queue: queue.publish_explorations(ids, settings(), sessions()),
        )


def _queued(what: str, publish) -> bool:
    """Call ``publish(workers.queue)``; any failure only leaves ``what`` for the sweeper."""
    try:
        from workers import queue
    except ImportError as exc:  # the worker package is optional for the API process
        log.warning("queue unavailable (%s); %s left for the sweeper", exc, what)
        return False
    try:
        return bool(publish(queue))
    except Exception:  # never fail a request that is already stored
        log.exception("publishing %s failed; left for the sweeper", what)
        return False


def api_owner() -> str:
    """Return a lease owner for a job the API runs itself: ``api:<hostname>:<pid>:<random>``."""
    return f"api:{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"


def answer_in(session, request_id: str, answer: dict) -> list[str] | None:
    """Store ``answer`` as the request's record in the caller's transaction (see
    ``workers.tasks.answer_in_transaction``); the explorations to publish after the commit, or
    None when it was not stored here (the request then goes to the queue)."""
    try:
        from workers.tasks import answer_in_transaction
    except ImportError as exc:
        log.warning("worker code unavailable (%s); request %s goes to the queue", exc, request_id)
        return None
    return answer_in_transaction(session, request_id, settings(), owner=api_owner(), answer=answer)
