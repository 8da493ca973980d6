"""Thin Celery tasks: take an id, claim the job, call the engine, store the outcome.

Every task may be delivered twice (late acks, redelivery, the sweeper): a task first claims its
job with a lease (a conditional UPDATE in ``service.store.jobs.claim``); a failed claim means
another worker has it, or it is finished, and the task exits quietly. The plain functions
(:func:`run_request_job`, :func:`run_rerun_job`, :func:`run_chunk_job`) hold the logic so unit
tests can call them directly against SQLite; the Celery tasks only pass the app's config.
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

from celery.signals import task_postrun, task_prerun, worker_ready, worker_shutdown
from sqlalchemy import select
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import sessionmaker

from service import jsonlog, metrics
from service.engine import Cancelled, EngineError, canonical_json, compute
from service.engine import run_chunk as engine_run_chunk
from service.engine.errors import describe_failure
from service.engine.records import differences
from service.store import analyses, audit, jobs
from service.store.db import session_scope
from service.store.jobs import KINDS
from service.store.models import Request, Rerun, Result
from workers.celery_app import TASK_NAMES, app
from workers.fanout import UNIT_SECONDS, ChunkExecutor, clear_units, work_units
from workers.queue import REQUEST_ID_HEADER, publish_and_mark, publish_helpers
from workers.sessions import sessions
from workers.sweeper import start_thread, stop_thread, sweep_once

log = logging.getLogger(__name__)


class LeaseLost(Exception):
    """Our lease on the job was taken over (we were too slow); stop without writing."""


def utcnow() -> datetime:
    """Return the current time as a timezone-aware UTC datetime."""
    return datetime.now(UTC)


def hostname() -> str:
    """Return this machine's host name (used in the audit actor)."""
    return socket.gethostname()


def actor() -> str:
    """Return the audit actor of this worker, ``worker:<hostname>``."""
    return f"worker:{hostname()}"


def new_owner() -> str:
    """Return a lease owner unique to this attempt: ``worker:<hostname>:<pid>:<random>``."""
    # jobs.* write audit events with the owner as actor, so it starts with actor().
    return f"{actor()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"


class _Hooks:
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
        """True when someone asked to cancel the request (one primary-key read per check)."""
        if self.kind != "request" or self._cancelled:
            return self._cancelled
        with session_scope(self.factory) as session:
            self._cancelled = jobs.cancel_requested(session, self.kind, self.job_id)
        return self._cancelled


def helper_publisher(kind: str, job_id: str, config: dict) -> Callable[[int], int]:
    """Return a function that publishes ``count`` helper tasks for the job; returns how many."""

    def publish(count: int) -> int:
        return publish_helpers(kind, job_id, count, config)

    return publish


def executor_for(
    factory, hooks: _Hooks, config: dict, *, fan_out: bool, runner, order, should_stop=None
) -> ChunkExecutor:
    """The engine's executor for one job: shares long batches with helpers when ``fan_out``."""
    return ChunkExecutor(
        factory,
        job_kind=hooks.kind,
        job_id=hooks.job_id,
        owner=hooks.owner,
        lease_seconds=float(config["LEASE_SECONDS"]),
        publish_helpers=helper_publisher(hooks.kind, hooks.job_id, config) if fan_out else None,
        helpers=int(config.get("FANOUT_HELPERS", 1)),
        split_seconds=float(config.get("FANOUT_SPLIT_SECONDS", 1.0)),
        unit_seconds=float(config.get("FANOUT_UNIT_SECONDS", UNIT_SECONDS)),
        heartbeat=hooks.renew,
        should_stop=should_stop,
        runner=runner,
        order=order,
    )


def _executor(factory, hooks: _Hooks, config: dict, *, fan_out: bool, runner, order):
    return executor_for(
        factory,
        hooks,
        config,
        fan_out=fan_out,
        runner=runner,
        order=order,
        should_stop=hooks.cancel,
    )


def _waited(kind: str, since: datetime | None) -> None:
    """Observe the queue wait of a job just claimed (submission to claim)."""
    if since is not None:
        if since.tzinfo is None:  # SQLite hands back naive UTC
            since = since.replace(tzinfo=UTC)
        metrics.QUEUE_WAIT.labels(kind).observe(max((utcnow() - since).total_seconds(), 0.0))


def _event(session, request_id: str | None, action: str, detail: dict, *, owner: str = "") -> None:
    # The actor is the owner's "<role>:<host>" prefix: worker:<host>, or api:<host> when the
    # API answered a closed-form question itself.
    who = ":".join(owner.split(":")[:2]) if owner.count(":") >= 2 else actor()
    audit.append_event(session, request_id=request_id, actor=who, action=action, detail=detail)


def _claim(session, kind: str, job_id: str, owner: str, config: dict) -> bool:
    """Take a request's or rerun's lease for whole LEASE_SECONDS; False when it is not ours."""
    lease = int(config["LEASE_SECONDS"])
    return jobs.claim(session, kind, job_id, owner, lease, int(config["MAX_ATTEMPTS"]))


def run_claimed(
    factory: sessionmaker,
    config: dict,
    kind: str,
    job_id: str,
    owner: str,
    work: Callable[[_Hooks], Any],
    store: Callable[[Any], str],
    *,
    cancellable: bool = False,
    log_failure: bool = True,
) -> str:
    """Run a claimed job's ``work`` and settle it: ``store`` the value, fail, cancel or stop.

    Returns ``store``'s outcome, 'failed', 'cancelled' (only when ``cancellable``) or 'lost';
    an OperationalError is raised, so the lease expires and the sweeper retries the job.
    """
    started = time.perf_counter()
    outcome = _settle(factory, config, kind, job_id, owner, work, store, cancellable, log_failure)
    metrics.COMPUTE_TIME.labels(kind, owner.split(":", 1)[0]).observe(time.perf_counter() - started)
    if outcome != "lost":
        # The job has ended: its shared work units are of no further use.
        with session_scope(factory) as session:
            clear_units(session, kind, job_id)
    return outcome


def _settle(factory, config, kind, job_id, owner, work, store, cancellable, log_failure) -> str:
    hooks = _Hooks(factory, kind=kind, job_id=job_id, owner=owner, config=config)
    try:
        value = work(hooks)
    except LeaseLost as exc:
        log.warning("%s; stopping without writing", exc)
        return "lost"
    except OperationalError:
        # The database went away: leave the lease to expire so the sweeper retries the job.
        raise
    except EngineError as exc:  # QuestionError and BudgetExceeded included: bad input, say why
        if cancellable and isinstance(exc, Cancelled):
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


def run_request_job(
    request_id: str,
    config: dict,
    *,
    owner: str | None = None,
    fan_out: bool = False,
    runner: Callable[[dict], dict] = engine_run_chunk,
    order: Callable[[list[int]], list[int]] | None = None,
    factory: sessionmaker | None = None,
    answer: dict | None = None,
) -> str:
    """Claim and compute one request; return its outcome ('computed', 'skipped', 'failed', ...).

    The API calls this too, with its own ``factory`` and an ``api:`` owner, for closed-form
    questions: the same claim, events and record as on a worker, without the queue. It passes
    the ``answer`` it computed while checking the submission; that record is stored instead of
    computing again when it was made from exactly the stored question (the engine is
    deterministic, so computing again would give the same record).
    """
    factory = factory or sessions(config)
    owner = owner or new_owner()
    with session_scope(factory) as session:
        if not _claim(session, "request", request_id, owner, config):
            return "skipped"
        row = session.get(Request, request_id)
        question = row.question
        attempts = row.attempts
        _waited("request", row.submitted_at)
        _event(
            session,
            request_id,
            "running",
            {"owner": owner, "attempt": attempts, "status": "running"},
            owner=owner,
        )
    log.info("request %s: claimed by %s (attempt %s)", request_id, owner, attempts)

    started = utcnow()

    def work(hooks: _Hooks) -> dict:
        if hooks.cancel():
            raise Cancelled(f"request {request_id} cancelled before it started")
        if answer is not None and answer.get("question") == question:
            return answer
        return compute(
            question,
            progress=hooks.progress,
            cancel=hooks.cancel,
            executor=_executor(factory, hooks, config, fan_out=fan_out, runner=runner, order=order),
            budget=int(config["SIMULATION_BUDGET"]),
        )

    def store(record: dict) -> str:
        with session_scope(factory) as session:
            stored = jobs.finish_request(
                session,
                request_id,
                owner,
                record,
                started_at=started,
                chunk_size=(question.get("simulation") or {}).get("chunk_size"),
            )
        if stored is None:
            log.warning("request %s: lease lost before the result was stored", request_id)
            return "lost"
        log.info("request %s: computed", request_id)
        _publish_waiting_analyses(factory, request_id, config)
        return "computed"

    return run_claimed(factory, config, "request", request_id, owner, work, store, cancellable=True)


def _publish_waiting_analyses(factory, request_id: str, config: dict) -> None:
    """Hand the broker the analyses that waited for this result (else the sweeper does, later)."""
    with session_scope(factory) as session:
        ids = analyses.waiting(session, request_id)
    for analysis_id in ids:
        publish_and_mark("analysis", analysis_id, config, factory)


def run_rerun_job(
    rerun_id: str,
    config: dict,
    *,
    owner: str | None = None,
    fan_out: bool = False,
    runner: Callable[[dict], dict] = engine_run_chunk,
    order: Callable[[list[int]], list[int]] | None = None,
) -> str:
    """Claim a rerun, recompute the stored question and compare with the stored record."""
    factory = sessions(config)
    owner = owner or new_owner()
    with session_scope(factory) as session:
        if not _claim(session, "rerun", rerun_id, owner, config):
            return "skipped"
        rerun = session.get(Rerun, rerun_id)
        request_id = rerun.request_id
        _waited("rerun", rerun.requested_at)
        question = session.scalar(select(Request.question).where(Request.id == request_id))
        original = session.scalar(select(Result.record).where(Result.request_id == request_id))
        _event(
            session,
            request_id,
            "rerun_running",
            {"rerun_id": rerun_id, "owner": owner},
            owner=owner,
        )

    def work(hooks: _Hooks) -> dict:
        if original is None:
            raise EngineError(f"request {request_id} has no stored result to compare with")
        # The stored normalized question carries the seed: the same question, the same digits.
        return compute(
            question,
            progress=hooks.progress,
            cancel=None,
            executor=_executor(factory, hooks, config, fan_out=fan_out, runner=runner, order=order),
            budget=int(config["SIMULATION_BUDGET"]),
        )

    def store(record: dict) -> str:
        with session_scope(factory) as session:
            done = jobs.finish_rerun(
                session,
                rerun_id,
                owner,
                record,
                identical=canonical_json(original) == canonical_json(record),
                differences=differences(original, record),
                env_rerun=record["reproducibility"].get("versions", {}),
            )
        return "done" if done else "lost"

    return run_claimed(factory, config, "rerun", rerun_id, owner, work, store, log_failure=False)


def run_helper_job(kind: str, job_id: str, config: dict, *, runner=engine_run_chunk) -> str:
    """Help a running job: compute its pending work units until none is left.

    Leaves early (before the next unit) when the job is no longer running or when a request or
    rerun waits in the queue, so helper work never holds up a request. Returns 'skipped' when
    there was nothing to do, else 'helped:<units>'.
    """
    if kind not in KINDS:
        raise ValueError(f"job_kind must be one of {', '.join(KINDS)}; got {kind!r}")
    factory = sessions(config)

    def keep_going() -> bool:
        with session_scope(factory) as session:
            if jobs.job_status(session, kind, job_id) != "running":
                return False
            return not jobs.work_waiting(session)

    done = work_units(
        factory,
        job_kind=kind,
        job_id=job_id,
        owner=new_owner(),
        runner=runner,
        keep_going=keep_going,
    )
    if done:
        log.info("%s %s: a helper computed %d unit(s)", kind, job_id, done)
    return f"helped:{done}" if done else "skipped"


def _config() -> dict:
    return dict(app.conf.sizewise)


@app.task(name=TASK_NAMES["request"], acks_late=True)
def run_request(request_id: str) -> str:
    """Compute one request by id (safe to deliver twice)."""
    return run_request_job(request_id, _config(), fan_out=True)


@app.task(name=TASK_NAMES["rerun"], acks_late=True)
def run_rerun(rerun_id: str) -> str:
    """Recompute one rerun by id and compare it with the stored record (safe to deliver twice)."""
    return run_rerun_job(rerun_id, _config(), fan_out=True)


@app.task(name=TASK_NAMES["helper"], acks_late=True)
def run_helper(job_kind: str, job_id: str) -> str:
    """Help a running job with its pending work units (safe to deliver twice)."""
    return run_helper_job(job_kind, job_id, _config())


@app.task(name=TASK_NAMES["chunk"], acks_late=True)
def run_chunk(*_args) -> str:
    """A chunk message of the previous release: chunks are no longer messages; drop it."""
    return "obsolete"


@app.task(name=TASK_NAMES["sweep"], acks_late=True)
def sweep() -> int:
    """Republish unpublished and abandoned jobs; return how many were published."""
    return sweep_once(_config())


def job_of(task_name: str, args) -> tuple[str | None, str | None]:
    """Return (job kind, job id) that a task message is about, (None, None) for other tasks."""
    args = list(args or ())
    if task_name == TASK_NAMES["helper"] and len(args) >= 2:
        return str(args[0]), str(args[1])
    for kind in KINDS:
        if task_name == TASK_NAMES.get(kind) and args:
            return kind, str(args[0])
    return None, None


_LOG_CONTEXTS: dict[str, object] = {}


@task_prerun.connect
def _bind_log_context(task_id=None, task=None, args=None, **_kwargs) -> None:
    """Every line a job logs carries its kind, id and the HTTP request id that published it."""
    kind, job_id = job_of(getattr(task, "name", ""), args)
    request = getattr(task, "request", None)
    request_id = request.get(REQUEST_ID_HEADER) if request is not None else None
    _LOG_CONTEXTS[task_id] = jsonlog.bind(request_id=request_id, job_kind=kind, job_id=job_id)


@task_postrun.connect
def _unbind_log_context(task_id=None, **_kwargs) -> None:
    token = _LOG_CONTEXTS.pop(task_id, None)
    if token is not None:
        try:
            jsonlog.unbind(token)
        except ValueError:  # bound in another context: nothing of ours to restore
            pass


@worker_ready.connect
def _start_sweeper(sender=None, **_kwargs) -> None:
    """Start the background sweeper thread in the worker's main process."""
    start_thread(_config())


@worker_shutdown.connect
def _stop_sweeper(**_kwargs) -> None:
    """Stop the sweeper thread when the worker shuts down."""
    stop_thread()
