"""Hand a committed job to the queue, or answer a closed-form question here and now.

A publish failure only delays a job (the sweeper publishes later). A closed-form question costs
milliseconds, so the API answers it itself with the worker's own code path (same claim, audit
events and sealed record); only simulations and explorations go through the broker.
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
    try:
        from workers.queue import publish_and_mark
    except ImportError as exc:  # the worker package is optional for the API process
        log.warning("queue unavailable (%s); %s %s left for the sweeper", exc, kind, job_id)
        return False
    try:
        return publish_and_mark(kind, job_id, settings(), sessions())
    except Exception:  # never fail a request that is already stored
        log.exception("publishing %s %s failed; left for the sweeper", kind, job_id)
        return False


def api_owner() -> str:
    """Return a lease owner for a job the API runs itself: ``api:<hostname>:<pid>:<random>``."""
    return f"api:{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"


def answer_now(request_id: str, answer: dict | None = None) -> str | None:
    """Compute a closed-form request in this process; return the outcome, None if not done here.

    ``answer`` is the record already computed from the request's question at submission (it is
    stored as is when the stored question is the one it answers).

    None means the request could not be run here (worker package missing, database hiccup): the
    caller then publishes it as usual. A claimed request whose run broke off is left on its lease
    and the sweeper hands it to a worker when the lease expires.
    """
    try:
        from workers.tasks import run_request_job
    except ImportError as exc:
        log.warning("worker code unavailable (%s); request %s goes to the queue", exc, request_id)
        return None
    try:
        return run_request_job(
            request_id, settings(), owner=api_owner(), factory=sessions(), answer=answer
        )
    except Exception:  # never fail a request that is already stored
        log.exception("request %s: computing at submission failed; left to the workers", request_id)
        return None
