"""The real queue: Flask API → PostgreSQL → Redis → a `celery worker` subprocess → PostgreSQL.

No eager mode and no mocks: each test submits through the Flask test client (create_app with the
same config the worker reads from its environment) and polls until the worker has finished.
"""

from __future__ import annotations

import pytest
from statsmodels.stats.power import TTestIndPower
from workers_testkit import Stack, canonical

from service.engine import compute

pytestmark = [pytest.mark.services, pytest.mark.slow]

# Power of the two-sided t test at d = 0.5, n = 30 per group, alpha .05: 0.4779
# (formula: noncentral t; recomputed with statsmodels TTestIndPower).
POWER_D05_N30 = TTestIndPower().power(effect_size=0.5, nobs1=30, alpha=0.05, ratio=1.0)


def _posted(method: str = "analytic", analysis: str | None = None, **simulation) -> dict:
    """A question as a requester posts it (the schema fills in the defaults)."""
    question = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"per_group": [30, 30]},
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "method": method,
    }
    if analysis is not None:
        question["analysis"] = analysis
    if method == "simulation":
        question["simulation"] = {"replicates": 4000, "seed": 20240611, "chunk_size": 500}
        question["simulation"].update(simulation)
    return question


@pytest.fixture
def stack(pg_redis_config):
    from service import create_app

    app = create_app(dict(pg_redis_config, TESTING=True))
    yield Stack(app)
    app.extensions["sizewise"]["engine"].dispose()


def test_analytic_and_simulated_requests_are_computed_and_a_rerun_is_identical(
    stack, pg_redis_config, start_worker
):
    worker = start_worker(pg_redis_config, concurrency=2)
    analytic = stack.submit(_posted())
    simulated = stack.submit(_posted("simulation"))
    body = stack.wait(analytic, worker=worker)
    assert body["status"] == "computed", body["error"]
    assert body["result"]["power"]["estimate"] == pytest.approx(POWER_D05_N30, abs=1e-4)
    body = stack.wait(simulated, worker=worker)
    assert body["status"] == "computed", body["error"]
    power = body["result"]["power"]
    assert power["replicates"] == 4000
    assert abs(power["estimate"] - POWER_D05_N30) < 4 * power["mcse"]
    # The record a worker stored is the engine's own answer to the stored question, digit for digit.
    assert canonical(body["result"]) == canonical(compute(body["question"]))
    rerun = stack.rerun(simulated, worker=worker)
    assert rerun["status"] == "done", rerun
    assert rerun["identical"] is True and rerun["differences"] == []


def test_a_running_simulation_is_cancelled_between_chunks(stack, pg_redis_config, start_worker):
    worker = start_worker(pg_redis_config, concurrency=1)
    # Long enough to be caught running: 160 rank-sum chunks drawing every observation.
    question = _posted("simulation", replicates=40_000, chunk_size=500, analysis="rank_sum")
    question["sample_size"] = {"per_group": [500, 500]}
    request_id = stack.submit(question)
    stack.wait(request_id, until=("running",) + ("computed", "failed"), worker=worker)
    stack.cancel(request_id)
    body = stack.wait(request_id, worker=worker)
    assert body["status"] == "cancelled", body
    assert body["result"] is None


# One worker process and two store byte-identical records, both pool processes computing units
# of the split job: tests/workers/test_fanout_stacks.py (on this stack and the embedded one).


def test_a_job_of_a_killed_worker_is_republished_and_finished_with_the_same_digits(
    stack, pg_redis_config, start_worker
):
    config = dict(pg_redis_config, LEASE_SECONDS=4, SWEEP_SECONDS=1)
    question = _posted("simulation", replicates=10_000, seed=99, analysis="rank_sum")
    question["sample_size"] = {"per_group": [500, 500]}
    doomed = start_worker(config, concurrency=1)
    request_id = stack.submit(question)
    seen = stack.wait(request_id, until=("running", "computed"), worker=doomed)
    assert seen["status"] == "running"  # caught mid-run, or the test proves nothing
    doomed.kill()  # no time to finish: its job and chunk leases are left to expire
    rescuer = start_worker(config, concurrency=2)
    body = stack.wait(request_id, worker=rescuer)
    assert body["status"] == "computed", body["error"]
    assert body["attempts"] == 2  # the sweeper republished it once the lease expired
    assert canonical(body["result"]) == canonical(compute(body["question"]))
