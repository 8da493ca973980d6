"""Analysis jobs: a computed request's sensitivity grid or robustness panel, run on a worker.

The discipline is run_request's (``workers.tasks``): claim the analysis with a lease, compute,
store the result only while the lease is ours, fail with the reason on bad input. An analysis
runs only once its request has a result: a worker that claims one too early gives it back
unpublished and without using an attempt (``jobs.release_analysis``), and the sweeper
publishes it again once the result exists (``jobs.stale_jobs``). Long simulated batches are
shared with helper workers through work units (``workers.fanout``, job kind 'analysis').
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from sqlalchemy import select

from service.engine import EngineError
from service.engine import run_chunk as engine_run_chunk
from service.engine.explore import analysis_cost, robustness, sensitivity
from service.store import jobs
from service.store.db import session_scope
from service.store.models import Analysis, Request, Result
from workers.celery_app import TASK_NAMES, app
from workers.queue import publish
from workers.tasks import _Hooks, _waited, executor_for, new_owner, run_claimed, sessions

log = logging.getLogger(__name__)

TASK_NAME = TASK_NAMES["analysis"]
CHUNK_TASK_NAME = TASK_NAMES["analysis_chunk"]
_ENDED_WITHOUT_RESULT = ("failed", "cancelled")


def publish_analysis(analysis_id: str, config: dict) -> bool:
    """Send ``sizewise.run_analysis``; True when the broker took it (False: the sweeper retries)."""
    return publish("analysis", analysis_id, config)


def _run(kind: str, params: dict, question: dict, record: dict, **hooks) -> dict:
    if kind == "sensitivity":
        return sensitivity(question, params["grid"], base=record, **hooks)
    return robustness(
        question,
        list(record["sample_size"]["per_arm"]),
        replicates=params["replicates"],
        seed=params["seed"],
        **hooks,
    )


def run_analysis_job(
    analysis_id: str,
    config: dict,
    *,
    owner: str | None = None,
    fan_out: bool = False,
    runner: Callable[[dict], dict] = engine_run_chunk,
    order: Callable[[list[int]], list[int]] | None = None,
) -> str:
    """Claim and compute one analysis; return 'done', 'waiting', 'skipped', 'failed' or 'lost'."""
    factory = sessions(config)
    owner = owner or new_owner()
    lease = float(config["LEASE_SECONDS"])
    with session_scope(factory) as session:
        if not jobs.claim(
            session, "analysis", analysis_id, owner, lease, int(config["MAX_ATTEMPTS"])
        ):
            return "skipped"
        row = session.get(Analysis, analysis_id)
        kind, params, request_id = row.kind, dict(row.params), row.request_id
        _waited("analysis", row.created_at)
        question, status = session.execute(
            select(Request.question, Request.status).where(Request.id == request_id)
        ).one()
        record = session.scalar(select(Result.record).where(Result.request_id == request_id))
        if record is None and status not in _ENDED_WITHOUT_RESULT:
            jobs.release_analysis(session, analysis_id, owner)
            log.info("analysis %s: request %s not computed yet; waiting", analysis_id, request_id)
            return "waiting"

    def work(hooks: _Hooks) -> dict:
        if record is None:
            raise EngineError(
                f"request {request_id} ended '{status}' without a result; nothing to analyse"
            )
        budget = int(config["SIMULATION_BUDGET"])
        # Priced again here: a robustness panel posted with the request only now knows its n.
        estimate = analysis_cost(kind, params, question, record)
        if estimate > budget:
            raise EngineError(
                f"estimated cost {estimate:,} draws exceeds the per-simulation budget of "
                f"{budget:,}; use fewer cells or fewer replicates"
            )
        executor = executor_for(factory, hooks, config, fan_out=fan_out, runner=runner, order=order)
        return _run(
            kind,
            params,
            question,
            record,
            executor=executor,
            progress=hooks.progress,
            budget=budget,
        )

    def store(result: dict) -> str:
        with session_scope(factory) as session:
            done = jobs.finish_analysis(session, analysis_id, owner, result)
        return "done" if done else "lost"

    return run_claimed(factory, config, "analysis", analysis_id, owner, work, store)


@app.task(name=TASK_NAME, acks_late=True)
def run_analysis(analysis_id: str) -> str:
    """Compute one analysis by id (safe to deliver twice)."""
    return run_analysis_job(analysis_id, dict(app.conf.sizewise), fan_out=True)


@app.task(name=CHUNK_TASK_NAME, acks_late=True)
def run_analysis_chunk(*_args) -> str:
    """A chunk message of the previous release: chunks are no longer messages; drop it."""
    return "obsolete"
