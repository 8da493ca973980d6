"""The sweeper: republish jobs that were never handed to the broker or whose worker died.

Each round also deletes what no job needs any more: work units of ended jobs and long-ended desk
sessions.

It runs as a daemon thread in every worker's main process, started on ``worker_ready`` (so no
separate beat process or schedule file is needed), every ``SWEEP_SECONDS``. Running it in many
workers at once is harmless: publishing a job twice only produces a duplicate delivery, and the
task's claim (a conditional UPDATE with a lease) lets exactly one worker run it. The same work
is also registered as the ``sizewise.sweep`` task for deployments that prefer Celery beat.
"""

from __future__ import annotations

import logging
import os
import threading
from datetime import UTC, datetime, timedelta

from service import jsonlog
from service.store import desk_sessions, jobs
from service.store.db import session_scope
from workers.fanout import clear_orphan_units
from workers.queue import publish_and_mark
from workers.sessions import sessions

log = logging.getLogger(__name__)

# Held for a whole sweep round, and across every fork: a pool child forked while this thread
# held a lock (logging, the connection pool, SQLite's) would wait on it forever, and the
# worker would take messages its replacement children never run.
ROUND_LOCK = threading.Lock()
if hasattr(os, "register_at_fork"):
    os.register_at_fork(
        before=ROUND_LOCK.acquire,
        after_in_parent=ROUND_LOCK.release,
        after_in_child=ROUND_LOCK.release,
    )


def sweep_once(config: dict, *, now: datetime | None = None) -> int:
    """Publish every stale job once; return how many the broker accepted."""
    factory = sessions(config)
    now = now or datetime.now(UTC)
    with session_scope(factory) as session:
        # Skip jobs the API may be publishing right now (committed, not yet marked).
        stale = jobs.stale_jobs(
            session,
            now,
            grace_seconds=grace(config).total_seconds(),
            republish_seconds=republish_after(config).total_seconds(),
        )
        orphans = clear_orphan_units(session)
        desks = desk_sessions.purge(session, now, desk_sessions.idle_limit(config))
    if orphans:
        log.info("sweeper: deleted %d work unit(s) of ended jobs", orphans)
    if desks:
        log.info("sweeper: deleted %d ended desk session(s)", desks)
    published = 0
    for kind, job_id, trace_id in stale:
        # A refusal means the broker is down; the next sweep tries again. The message carries
        # the id of the HTTP request that created the job, as its first publication did.
        with jsonlog.context(request_id=trace_id):
            published += publish_and_mark(kind, job_id, config, factory)
    if stale:
        log.info("sweeper: %d stale job(s), %d republished", len(stale), published)
    return published


class Periodic:
    """A daemon thread that runs ``work(config)`` every ``interval`` seconds (one per process)."""

    def __init__(self, name: str, work, what: str):
        self.name, self.work, self.what = name, work, what
        self.thread: threading.Thread | None = None
        self.stopping = threading.Event()

    def _loop(self, config: dict, interval: float) -> None:
        while not self.stopping.wait(interval):
            try:
                self.work(config)
            except Exception:  # a database hiccup must not kill the thread; try again next round
                log.exception("%s round failed", self.what)

    def start(self, config: dict, interval: float) -> threading.Thread:
        """Start the thread unless it runs already; return it."""
        if self.thread is not None and self.thread.is_alive():
            return self.thread
        self.stopping.clear()
        self.thread = threading.Thread(
            target=self._loop, args=(dict(config), interval), name=self.name, daemon=True
        )
        self.thread.start()
        return self.thread

    def stop(self, timeout: float = 5.0) -> None:
        """Ask the thread to stop and wait briefly for it."""
        self.stopping.set()
        if self.thread is not None:
            self.thread.join(timeout)
        self.thread = None


def _sweep_round(config: dict) -> None:
    with ROUND_LOCK:
        sweep_once(config)


_SWEEPER = Periodic("sizewise-sweeper", _sweep_round, "sweeper")


def start_thread(config: dict) -> threading.Thread:
    """Start the sweeper daemon thread (once per process) and return it."""
    return _SWEEPER.start(config, max(float(config.get("SWEEP_SECONDS", 15)), 0.5))


def stop_thread(timeout: float = 5.0) -> None:
    """Ask the sweeper thread to stop and wait briefly for it."""
    _SWEEPER.stop(timeout)


def republish_after(config: dict) -> timedelta:
    """How long a published job may wait unclaimed before its message counts as lost.

    Long enough that a busy queue is not flooded with duplicates (they are harmless, only one
    worker can claim a job), short enough that a broker restart costs minutes, not forever.
    """
    return timedelta(
        seconds=max(float(config["LEASE_SECONDS"]), 5 * float(config["SWEEP_SECONDS"]))
    )


def grace(config: dict) -> timedelta:
    """Return how old an unpublished job must be before the sweeper publishes it."""
    return timedelta(seconds=max(2.0, min(float(config.get("SWEEP_SECONDS", 15)), 5.0)))
