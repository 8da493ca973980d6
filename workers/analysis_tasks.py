"""Analysis jobs: a computed request's sensitivity grid or robustness panel, run on a worker.

The discipline is run_request's (``workers.tasks``): claim the analysis with a lease, compute,
store the result only while the lease is ours, fail with the reason on bad input. An analysis
runs only once its request has a result: a worker that claims one too early gives it back
unpublished and without using an attempt (``jobs.release_analysis``), and the sweeper
publishes it again once the result exists (``jobs.stale_jobs``). Simulated cells fan out
their chunks across workers through ``chunk_results`` with job kind 'analysis'.
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
from workers.fanout import ChunkExecutor, run_one
from workers.tasks import _Hooks, new_owner, run_claimed, sessions

log = logging.getLogger(__name__)

TASK_NAME = TASK_NAMES["analysis"]
CHUNK_TASK_NAME = TASK_NAMES["analysis_chunk"]
_ENDED_WITHOUT_RESULT = ("failed", "cancelled")


def publish_analysis(analysis_id: str, config: dict) -> bool:
    """Send ``sizewise.run_analysis``; True when the broker took it (False: the sweeper retries)."""
    from workers.queue import publish

    return publish("analysis", analysis_id, config)


def publish_analysis_chunk(analysis_id: str, task: dict, config: dict) -> bool:
    """Send one ``sizewise.run_analysis_chunk`` so another worker helps with a batch."""
    from workers.queue import publish_chunk

    return publish_chunk("analysis", analysis_id, task, config)


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
        executor = ChunkExecutor(
            factory,
            job_kind="analysis",
            job_id=analysis_id,
            owner=owner,
            lease_seconds=lease,
            publish=(
                (lambda _kind, job_id, task: publish_analysis_chunk(job_id, task, config))
                if fan_out
                else None
            ),
            heartbeat=hooks.renew,
            runner=runner,
            order=order,
        )
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


def run_analysis_chunk_job(analysis_id: str, task: dict, config: dict) -> str:
    """Help a running analysis with one chunk; quiet when it is taken, done or not running."""
    factory = sessions(config)
    with session_scope(factory) as session:
        status = session.scalar(select(Analysis.status).where(Analysis.id == analysis_id))
    if status != "running":
        return "skipped"
    return run_one(
        factory,
        job_kind="analysis",
        job_id=analysis_id,
        task=task,
        owner=new_owner(),
        lease_seconds=float(config["LEASE_SECONDS"]),
    )


@app.task(name=TASK_NAME, acks_late=True)
def run_analysis(analysis_id: str) -> str:
    """Compute one analysis by id (safe to deliver twice)."""
    return run_analysis_job(analysis_id, dict(app.conf.sizewise), fan_out=True)


@app.task(name=CHUNK_TASK_NAME, acks_late=True)
def run_analysis_chunk(analysis_id: str, task: dict) -> str:
    """Compute one chunk of a running analysis if no one else has (safe to deliver twice)."""
    return run_analysis_chunk_job(analysis_id, task, dict(app.conf.sizewise))
