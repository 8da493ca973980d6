"""Exploration jobs: a computed request's sensitivity grid or robustness panel, run on a worker.

The discipline is every job's (``workers.running``): claim the exploration with a lease,
compute, store the result only while the lease is ours, fail with the reason on bad input. An
exploration runs only once its request has a result: a worker that claims one too early gives
it back unpublished and without using an attempt (``jobs.release_exploration``), and the
sweeper publishes it again once the result exists (``jobs.stale_jobs``). Long simulated
batches are shared with helper workers through work units (``workers.fanout``).
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from sqlalchemy import select

from service.engine import EngineError
from service.engine import run_chunk as engine_run_chunk
from service.engine.explore import exploration_cost, robustness, sensitivity
from service.schemas.explorations import budget_refusal
from service.store import jobs
from service.store.db import session_scope
from service.store.models import Exploration, Request, Result
from workers.celery_app import TASK_NAMES, app
from workers.running import JobHooks, claim, executor_for, new_owner, run_claimed, waited
from workers.sessions import sessions

log = logging.getLogger(__name__)

_ENDED_WITHOUT_RESULT = ("failed", "cancelled")


def _run(exploration_type: str, params: dict, question: dict, record: dict, **hooks) -> dict:
    if exploration_type == "sensitivity_grid":
        return sensitivity(question, params["grid"], base=record, **hooks)
    return robustness(
        question,
        list(record["sample_size"]["per_group"]),
        replicates=params["replicates"],
        seed=params["seed"],
        **hooks,
    )


def run_exploration_job(
    exploration_id: str,
    config: dict,
    *,
    owner: str | None = None,
    fan_out: bool = False,
    runner: Callable[[dict], dict] = engine_run_chunk,
    order: Callable[[list[int]], list[int]] | None = None,
) -> str:
    """Claim and compute one exploration; return 'done', 'waiting', 'skipped', 'failed' or 'lost'."""
    factory = sessions(config)
    owner = owner or new_owner()
    with session_scope(factory) as session:
        if not claim(session, "exploration", exploration_id, owner, config):
            return "skipped"
        row = session.get(Exploration, exploration_id)
        exploration_type, params, request_id = row.type, dict(row.params), row.request_id
        waited("exploration", row.created_at)
        question, status = session.execute(
            select(Request.question, Request.status).where(Request.id == request_id)
        ).one()
        record = session.scalar(select(Result.record).where(Result.request_id == request_id))
        if record is None and status not in _ENDED_WITHOUT_RESULT:
            jobs.release_exploration(session, exploration_id, owner)
            log.info(
                "exploration %s: request %s not computed yet; waiting", exploration_id, request_id
            )
            return "waiting"

    def work(hooks: JobHooks) -> dict:
        if record is None:
            raise EngineError(
                f"request {request_id} ended '{status}' without a result; nothing to explore"
            )
        budget = int(config["SIMULATION_BUDGET"])
        # Priced again here: a robustness panel posted with the request only now knows its n.
        cost = exploration_cost(exploration_type, params, question, record)
        refusal = budget_refusal(cost, budget)
        if refusal is not None:
            raise EngineError(refusal)
        executor = executor_for(factory, hooks, config, fan_out=fan_out, runner=runner, order=order)
        return _run(
            exploration_type,
            params,
            question,
            record,
            executor=executor,
            progress=hooks.progress,
            budget=budget,
        )

    def store(result: dict) -> str:
        with session_scope(factory) as session:
            done = jobs.finish_exploration(session, exploration_id, owner, result)
        return "done" if done else "lost"

    return run_claimed(factory, config, "exploration", exploration_id, owner, work, store)


@app.task(name=TASK_NAMES["exploration"], acks_late=True)
def run_exploration(exploration_id: str) -> str:
    """Compute one exploration by id (safe to deliver twice)."""
    return run_exploration_job(exploration_id, dict(app.conf.sizewise), fan_out=True)
