"""Hand a committed job to the queue; a failure only delays it (the sweeper publishes later)."""

from __future__ import annotations

import logging

from service.store import jobs
from service.store.db import session_scope

from .context import sessions, settings

log = logging.getLogger(__name__)


def publish_job(kind: str, job_id: str) -> bool:
    """Publish the job's task after the commit and mark it published; False leaves it for later."""
    try:
        from workers.queue import publish
    except ImportError as exc:  # the worker package is optional for the API process
        log.warning("queue unavailable (%s); %s %s left for the sweeper", exc, kind, job_id)
        return False
    try:
        sent = publish(kind, job_id, settings())
    except Exception:  # never fail a request that is already stored
        log.exception("publishing %s %s failed; left for the sweeper", kind, job_id)
        return False
    if not sent:
        return False
    try:
        with session_scope(sessions()) as session:
            jobs.mark_published(session, kind, job_id)
    except Exception:  # the task is sent; a missing marker only means a harmless republish
        log.exception("could not mark %s %s published", kind, job_id)
    return True
