"""Thin Celery tasks: take an id, claim the job, call the engine, store the outcome.

Every task may be delivered twice (late acks, redelivery, the sweeper): a task first claims its
job with a lease (a conditional UPDATE in ``service.store.jobs.claim``); a failed claim means
another worker has it, or it is finished, and the task exits quietly. The plain functions
(:func:`run_request_job`, :func:`run_rerun_job`, :func:`run_helper_job`) hold the logic so unit
tests can call them directly against SQLite; the Celery tasks only pass the app's config. How a
claimed job is run and settled is ``workers.running``'s, shared with the explorations.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable

from celery.signals import task_postrun, task_prerun, worker_ready, worker_shutdown
from sqlalchemy import select

from service import jsonlog, metrics
from service.engine import Cancelled, EngineError, canonical_json, compute
from service.engine import run_chunk as engine_run_chunk
from service.engine.records import differences
from service.store import audit, explorations, jobs
from service.store.db import session_scope
from service.store.models import Request, Rerun, Result
from service.store.types import utcnow
from workers.celery_app import TASK_NAMES, app
from workers.fanout import work_units
from workers.queue import REQUEST_ID_HEADER, publish_explorations
from workers.running import (
    JobHooks,
    actor,
    claim,
    executor_for,
    new_owner,
    run_claimed,
    waited,
)
from workers.sessions import sessions
from workers.sweeper import start_thread, stop_thread, sweep_once

__all__ = ["run_helper_job", "run_request_job", "run_rerun_job", "sessions"]

log = logging.getLogger(__name__)


def _event(session, request_id: str | None, action: str, detail: dict, *, owner: str = "") -> None:
    # The actor is the owner's "<role>:<host>" prefix: worker:<host>, or api:<host> when the
    # API answered a closed-form question itself.
    who = ":".join(owner.split(":")[:2]) if owner.count(":") >= 2 else actor()
    audit.append_event(session, request_id=request_id, actor=who, action=action, detail=detail)


def _running(session, row: Request, owner: str) -> None:
    """A claimed request starts: its queue wait measured and its 'running' event appended."""
    waited("request", row.submitted_at)
    _event(
        session,
        row.id,
        "running",
        {"owner": owner, "attempt": row.attempts, "status": "running"},
        owner=owner,
    )


def run_request_job(
    request_id: str,
    config: dict,
    *,
    owner: str | None = None,
    fan_out: bool = False,
    runner: Callable[[dict], dict] = engine_run_chunk,
    order: Callable[[list[int]], list[int]] | None = None,
) -> str:
    """Claim and compute one request; return its outcome ('computed', 'skipped', 'failed', ...).

    The API answers closed-form questions itself with :func:`answer_in_transaction` (the same
    claim, events and record, in the transaction that stores the request); this is the queue's
    path.
    """
    factory = sessions(config)
    owner = owner or new_owner()
    with session_scope(factory) as session:
        if not claim(session, "request", request_id, owner, config):
            return "skipped"
        row = session.get(Request, request_id)
        question = row.question
        attempts = row.attempts
        simulated = row.method != "analytic"
        _running(session, row, owner)
    log.info("request %s: claimed by %s (attempt %s)", request_id, owner, attempts)

    started = utcnow()

    def work(hooks: JobHooks) -> dict:
        if hooks.cancel():
            raise Cancelled(f"request {request_id} cancelled before it started")
        return compute(
            question,
            progress=hooks.progress,
            cancel=hooks.cancel,
            executor=executor_for(
                factory, hooks, config, fan_out=fan_out, runner=runner, order=order
            ),
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
            # The explorations that waited for this result, read in the same transaction.
            waiting = explorations.waiting(session, request_id) if stored is not None else []
        if stored is None:
            log.warning("request %s: lease lost before the result was stored", request_id)
            return "lost"
        log.info("request %s: computed", request_id)
        publish_explorations(waiting, config, factory)
        return "computed"

    # A closed-form request never has work units: no DELETE of them when it ends.
    return run_claimed(factory, config, "request", request_id, owner, work, store, units=simulated)


def answer_in_transaction(
    session, request_id: str, config: dict, *, owner: str, answer: dict
) -> list[str] | None:
    """Store a closed-form request's ``answer`` in the caller's transaction, as a worker would.

    The API calls this in the transaction that inserts the request, so the request, its claim,
    its 'submitted', 'running' and 'computed' events (chained as ever) and its record are
    committed together: one commit (one WAL flush on PostgreSQL) instead of three, and no reader
    can see the request computed without its record. Returns the explorations waiting for this
    result (to publish after the commit), or None when nothing was stored: the answer is not of
    the stored question, the claim failed, or an error rolled back the savepoint it runs in (the
    received request itself stays in the transaction and goes to the queue as before).
    """
    started = time.perf_counter()
    try:
        with session.begin_nested():
            row = session.get(Request, request_id)
            if answer.get("question") != row.question:
                return None
            if not claim(session, "request", request_id, owner, config):
                return None
            _running(session, row, owner)
            stored = jobs.finish_request(
                session, request_id, owner, answer, started_at=utcnow(), chunk_size=None
            )
            if stored is None:  # the lease was taken in this transaction: a defect, never half
                raise RuntimeError(f"request {request_id}: lease lost inside its own transaction")
            waiting = explorations.waiting(session, request_id)
    except Exception:
        log.exception("request %s: answering at submission failed; left to the workers", request_id)
        return None
    metrics.COMPUTE_TIME.labels("request", owner.split(":", 1)[0]).observe(
        time.perf_counter() - started
    )
    log.info("request %s: computed at submission by %s", request_id, owner)
    return waiting


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
        if not claim(session, "rerun", rerun_id, owner, config):
            return "skipped"
        rerun = session.get(Rerun, rerun_id)
        request_id = rerun.request_id
        waited("rerun", rerun.requested_at)
        question = session.scalar(select(Request.question).where(Request.id == request_id))
        original = session.scalar(select(Result.record).where(Result.request_id == request_id))
        _event(
            session,
            request_id,
            "rerun_running",
            {"rerun_id": rerun_id, "owner": owner},
            owner=owner,
        )

    def work(hooks: JobHooks) -> dict:
        if original is None:
            raise EngineError(f"request {request_id} has no stored result to compare with")
        # The stored normalized question carries the seed: the same question, the same digits.
        return compute(
            question,
            progress=hooks.progress,
            cancel=None,
            executor=executor_for(
                factory, hooks, config, fan_out=fan_out, runner=runner, order=order
            ),
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
    jobs.job_kind(kind)  # ValueError naming the jobs for anything else
    factory = sessions(config)

    def keep_going(session) -> bool:
        # Asked inside the transaction that claims the next unit (no round trip of its own).
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
def run_helper(job: str, job_id: str) -> str:
    """Compute pending work units of any running job (the one chunk task; safe to deliver twice)."""
    return run_helper_job(job, job_id, _config())


@app.task(name=TASK_NAMES["sweep"], acks_late=True)
def sweep() -> int:
    """Republish unpublished and abandoned jobs; return how many were published."""
    return sweep_once(_config())


def job_of(task_name: str, args) -> tuple[str | None, str | None]:
    """Return (job, job id) that a task message is about, (None, None) for other tasks."""
    args = list(args or ())
    if task_name == TASK_NAMES["helper"] and len(args) >= 2:
        return str(args[0]), str(args[1])
    for kind in jobs.JOB_NAMES:
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
