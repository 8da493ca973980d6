"""How a worker runs one claimed job, whatever the job: lease hooks, executor, settling.

Every job (``service.store.jobs.JOB_KINDS``: request, rerun, exploration) follows one
discipline: claim it with a lease, compute while renewing the lease, store the outcome only
while the lease is ours, fail with the reason in words on bad input. ``workers.tasks`` and
``workers.exploration_tasks`` hold what differs (what to compute, where to store it).
"""

from __future__ import annotations

import logging
import os
import socket
import time
import uuid
from collections.abc import Callable
from datetime import UTC, datetime
from typing import Any

from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import sessionmaker

from service import metrics
from service.engine import Cancelled, EngineError
from service.engine.errors import describe_failure
from service.store import jobs
from service.store.db import session_scope
from service.store.types import utcnow
from workers.fanout import MIN_UNIT_SECONDS, UNIT_SECONDS, ChunkExecutor, clear_units
from workers.queue import publish_helpers

log = logging.getLogger(__name__)

CANCEL_CHECK_SECONDS = 0.2  # how often a running job reads its cancel flag, at most


class LeaseLost(Exception):
    """Our lease on the job was taken over (we were too slow); stop without writing."""


def actor() -> str:
    """Return the audit actor of this worker, ``worker:<hostname>``."""
    return f"worker:{socket.gethostname()}"


def new_owner() -> str:
    """Return a lease owner unique to this attempt: ``worker:<hostname>:<pid>:<random>``."""
    # jobs.* write audit events with the owner as actor, so it starts with actor().
    return f"{actor()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"


class JobHooks:
    """progress/cancel/heartbeat callbacks for one job, throttled so the database is not flooded."""

    def __init__(self, factory, *, kind: str, job_id: str, owner: str, config: dict):
        self.factory = factory
        self.kind = kind
        self.job_id = job_id
        self.owner = owner
        self.lease = float(config["LEASE_SECONDS"])
        self.fraction = 0.0
        self._renewed = time.monotonic()
        self._cancelled = False
        # The cancel flag is read at most this often: a read per chunk cost more than the chunks.
        self.cancel_every = float(config.get("CANCEL_CHECK_SECONDS", CANCEL_CHECK_SECONDS))
        self._checked: float | None = None

    def renew(self, force: bool = False) -> None:
        """Renew the lease (and write progress) at most every few seconds; raise LeaseLost."""
        now = time.monotonic()
        if not force and now - self._renewed < min(2.0, self.lease / 4):
            return
        with session_scope(self.factory) as session:
            ok = jobs.renew(session, self.kind, self.job_id, self.owner, self.fraction, self.lease)
        self._renewed = now
        if not ok:
            raise LeaseLost(f"{self.kind} {self.job_id}: lease taken over from {self.owner}")

    def progress(self, fraction: float) -> None:
        """Record the engine's progress and renew the lease."""
        self.fraction = max(self.fraction, min(max(float(fraction), 0.0), 1.0))
        self.renew()

    def cancel(self) -> bool:
        """True when someone asked to cancel the job: one primary-key read, at most every
        ``cancel_every`` seconds (the first check always reads)."""
        if not jobs.job_kind(self.kind).cancellable or self._cancelled:
            return self._cancelled
        now = time.monotonic()
        if self._checked is not None and now - self._checked < self.cancel_every:
            return False
        self._checked = now
        with session_scope(self.factory) as session:
            self._cancelled = jobs.cancel_requested(session, self.kind, self.job_id)
        return self._cancelled


def claim(session, kind: str, job_id: str, owner: str, config: dict) -> bool:
    """Take the job's lease for LEASE_SECONDS; False when it is not ours (or not claimable)."""
    lease = float(config["LEASE_SECONDS"])
    return jobs.claim(session, kind, job_id, owner, lease, int(config["MAX_ATTEMPTS"]))


def executor_for(
    factory, hooks: JobHooks, config: dict, *, fan_out: bool, runner, order
) -> ChunkExecutor:
    """The engine's executor for one job: shares long batches with helpers when ``fan_out``."""
    kind, job_id = hooks.kind, hooks.job_id

    def publish(count: int) -> int:
        return publish_helpers(kind, job_id, count, config)

    return ChunkExecutor(
        factory,
        job_kind=kind,
        job_id=job_id,
        owner=hooks.owner,
        lease_seconds=float(config["LEASE_SECONDS"]),
        publish_helpers=publish if fan_out else None,
        helpers=int(config.get("FANOUT_HELPERS", 1)),
        split_seconds=float(config.get("FANOUT_SPLIT_SECONDS", 0.25)),
        unit_seconds=float(config.get("FANOUT_UNIT_SECONDS", UNIT_SECONDS)),
        min_unit_seconds=float(config.get("FANOUT_MIN_UNIT_SECONDS", MIN_UNIT_SECONDS)),
        heartbeat=hooks.renew,
        should_stop=hooks.cancel if jobs.job_kind(kind).cancellable else None,
        runner=runner,
        order=order,
    )


def waited(kind: str, since: datetime | None) -> None:
    """Observe the queue wait of a job just claimed (submission to claim)."""
    if since is not None:
        if since.tzinfo is None:  # SQLite hands back naive UTC
            since = since.replace(tzinfo=UTC)
        metrics.QUEUE_WAIT.labels(kind).observe(max((utcnow() - since).total_seconds(), 0.0))


def run_claimed(
    factory: sessionmaker,
    config: dict,
    kind: str,
    job_id: str,
    owner: str,
    work: Callable[[JobHooks], Any],
    store: Callable[[Any], str],
    *,
    log_failure: bool = True,
    units: bool = True,
) -> str:
    """Run a claimed job's ``work`` and settle it: ``store`` the value, fail, cancel or stop.

    Returns ``store``'s outcome, 'failed', 'cancelled' (cancellable jobs only) or 'lost';
    an OperationalError is raised, so the lease expires and the sweeper retries the job.
    ``units`` False says the job can have no work units (nothing to delete when it ends).
    """
    started = time.perf_counter()
    outcome = _settle(factory, config, kind, job_id, owner, work, store, log_failure)
    metrics.COMPUTE_TIME.labels(kind, owner.split(":", 1)[0]).observe(time.perf_counter() - started)
    if outcome != "lost" and units:
        # The job has ended: its shared work units are of no further use.
        with session_scope(factory) as session:
            clear_units(session, kind, job_id)
    return outcome


def _settle(factory, config, kind, job_id, owner, work, store, log_failure) -> str:
    hooks = JobHooks(factory, kind=kind, job_id=job_id, owner=owner, config=config)
    try:
        value = work(hooks)
    except LeaseLost as exc:
        log.warning("%s; stopping without writing", exc)
        return "lost"
    except OperationalError:
        # The database went away: leave the lease to expire so the sweeper retries the job.
        raise
    except EngineError as exc:  # QuestionError and BudgetExceeded included: bad input, say why
        if isinstance(exc, Cancelled) and jobs.job_kind(kind).cancellable:
            with session_scope(factory) as session:
                ended = jobs.cancel(session, kind, job_id, owner)
            return "cancelled" if ended else "lost"
        message = str(exc)
        if exc.__cause__ is not None:  # an unforeseen numeric failure: the words go to the user
            log.warning("%s %s: %s", kind, job_id, message, exc_info=exc.__cause__)
    except Exception as exc:  # a defect, not bad input: record it rather than retry forever
        # The exception (name, traceback) is for the logs; the stored error is in words.
        log.exception("%s %s: unexpected error", kind, job_id)
        message = f"the computation failed: {describe_failure(exc)}"
    else:
        return store(value)

    with session_scope(factory) as session:
        ended = jobs.fail(session, kind, job_id, owner, message)
    if log_failure:
        log.info("%s %s: failed: %s", kind, job_id, message)
    return "failed" if ended else "lost"
