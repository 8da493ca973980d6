"""kill -9 in the middle of a chunked simulation: the job is taken over and ends with the same digits.

Real processes only: two ``celery worker`` subprocesses (prefork, 2 children each) on a fresh
PostgreSQL database and the session's Redis database. For each of several requests the test waits
until the simulation is part-way through its chunks, then SIGKILLs either the pool child that holds
the request's lease or that child's worker main process. A short lease (5 s) and sweep (1 s) let
the surviving workers take over quickly. Every request must end ``computed`` with exactly one
result row whose canonical JSON equals the engine's own answer to the stored question.
"""

from __future__ import annotations

import os
import signal
import time

import psutil
import pytest
from sqlalchemy import select
from workers_testkit import Stack

from service import create_app
from service.config import load_config
from service.engine import canonical_json, compute
from service.store.db import session_scope
from service.store.models import Request, Result
from tests.reliability.helpers import wait_for
from workers.tasks import sessions

pytestmark = [pytest.mark.services, pytest.mark.slow]

# Big enough (about 20 s in one process) that a kill 1 s after the run starts lands mid-run even
# when fan-out spreads it over four pool children.
REPLICATES = 100_000
CHUNK_SIZE = 500
CHUNKS = REPLICATES // CHUNK_SIZE


def _posted(seed: int) -> dict:
    """Power of a rank-sum comparison on skewed (lognormal) data, big enough to be caught mid-run."""
    return {
        "outcome": "ordinal",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"total": 1000},
        "simulation": {
            "replicates": REPLICATES,
            "chunk_size": CHUNK_SIZE,
            "seed": seed,
            "data": {
                "control": {"family": "lognormal", "mu": 1.0, "sigma": 0.8},
                "treatment": {"family": "lognormal", "mu": 1.1, "sigma": 0.8},
            },
        },
    }


@pytest.fixture
def config(pg_url: str, redis_url: str) -> dict:
    """Short leases and sweeps so a dead worker's job is taken over within seconds."""
    return load_config(
        {
            "DATABASE_URL": pg_url,
            "BROKER_URL": redis_url,
            "LEASE_SECONDS": 5,
            "SWEEP_SECONDS": 1,
            # Each kill costs the job an attempt; leave room for an unlucky second one.
            "MAX_ATTEMPTS": 6,
        }
    )


@pytest.fixture
def stack(config: dict):
    app = create_app(dict(config, TESTING=True))
    yield Stack(app)
    app.extensions["sizewise"]["engine"].dispose()


def _mid_run(factory, request_id: str) -> tuple[int, int] | None:
    """(lease owner's pid, attempt) once the request runs on a worker (the test then waits 1 s).

    Progress is written per engine batch, and this question is one batch, so the test cannot
    wait for a progress value; 1 s into a run of several seconds is part-way.
    """
    with session_scope(factory) as session:
        status, owner, attempts = session.execute(
            select(Request.status, Request.lease_owner, Request.attempts).where(
                Request.id == request_id
            )
        ).one()
    if status != "running" or owner is None:
        return None
    # Lease owners are worker:<host>:<pid>:<random> (workers.tasks.new_owner).
    return int(owner.rsplit(":", 2)[1]), attempts


@pytest.mark.parametrize("target", ["pool_child", "worker_main"])
def test_killed_worker_job_completes_with_identical_digits(config, stack, start_worker, target):
    factory = sessions(config)
    workers = [start_worker(config, concurrency=2), start_worker(config, concurrency=2)]
    finished = []
    for round_number in range(3):
        request_id = stack.submit(_posted(seed=7100 + round_number))
        pid, _attempt = wait_for(
            lambda rid=request_id: _mid_run(factory, rid), 120, f"{request_id} mid-run", 0.05
        )
        time.sleep(1.0)
        assert _mid_run(factory, request_id) is not None, f"{request_id} ended before the kill"
        child = psutil.Process(pid)
        main_pids = {w.proc.pid for w in workers if w.proc is not None}
        # The lease holder is a prefork pool child of one of our worker main processes.
        assert child.ppid() in main_pids, (pid, child.ppid(), main_pids)
        victim = pid if target == "pool_child" else child.ppid()
        os.kill(victim, signal.SIGKILL)
        if target == "worker_main":
            dead = next(w for w in workers if w.proc.pid == victim)
            dead.proc.wait(10)
            # Keep two live workers for the next round; the orphaned pool goes at teardown.
            workers.append(start_worker(config, concurrency=2))
            workers.remove(dead)
        finished.append(request_id)
        body = stack.wait(request_id, timeout=150, worker=workers[-1])
        assert body["status"] == "computed", (body["error"], workers[-1].tail())

    with session_scope(factory) as session:
        for request_id in finished:
            question, attempts = session.execute(
                select(Request.question, Request.attempts).where(Request.id == request_id)
            ).one()
            records = session.scalars(
                select(Result.record).where(Result.request_id == request_id)
            ).all()
            assert len(records) == 1, request_id  # first result wins, no second row
            # The undisturbed answer: the engine in this process, same normalized question.
            assert canonical_json(records[0]) == canonical_json(compute(question)), request_id
            assert records[0]["power"]["replicates"] == REPLICATES
            if target == "pool_child":
                # The killed attempt was claimed, so the one that finished came after it.
                assert attempts >= 2, (request_id, attempts)


def test_embedded_default_survives_the_death_of_both_pool_children(sqlite_config, start_worker):
    """The embedded default (SQLite + folder broker): kill both pool children mid-simulation;
    the replacement children must take the job back and finish it with the undisturbed digits."""
    config = dict(sqlite_config, LEASE_SECONDS=10, SWEEP_SECONDS=1, MAX_ATTEMPTS=6)
    app = create_app(dict(config, TESTING=True))
    stack = Stack(app)
    try:
        worker = start_worker(config, concurrency=2)
        request_id = stack.submit(_posted(seed=7200))
        stack.wait(request_id, until=("running", "computed"), timeout=120, worker=worker)
        time.sleep(1.0)  # part-way through its 200 chunks (several seconds in all)
        children = psutil.Process(worker.proc.pid).children()
        assert len(children) == 2, children
        for child in children:
            os.kill(child.pid, signal.SIGKILL)
        body = stack.wait(request_id, timeout=90, worker=worker)
        assert body["status"] == "computed", (body["error"], worker.tail())
        assert canonical_json(body["result"]) == canonical_json(compute(body["question"]))
        assert body["attempts"] >= 2
        # The sweeper's republishing leaves one 'published' event, however often it resent.
        actions = [e["action"] for e in body["history"]]
        assert actions.count("published") == 1, actions
        # A second request still runs on the replacement children.
        second = stack.submit(
            _posted(seed=7201) | {"simulation": {**_posted(7201)["simulation"], "replicates": 1000}}
        )
        assert stack.wait(second, timeout=120, worker=worker)["status"] == "computed"
    finally:
        app.extensions["sizewise"]["engine"].dispose()
