"""A request submitted behind a big, split job is not stuck behind its helper work.

Real PostgreSQL, Redis and a `celery worker` subprocess with two pool processes: one runs the big
job, the other helps with its work units until a request is waiting, then makes way. The check is
the order in which the two requests end (no wall-clock bound: the machine is shared).
"""

from __future__ import annotations

import pytest
from workers_testkit import Stack

pytestmark = [pytest.mark.services, pytest.mark.slow]


def _simulated(replicates: int, seed: int, per_group: int, analysis: str) -> dict:
    """A simulated power question (continuous outcome, two groups) as the intake form posts it."""
    return {
        "outcome": "continuous",
        "layout": "two_groups",
        "analysis": analysis,
        "find": "power",
        "sample_size": {"per_group": [per_group, per_group]},
        "effect": {"difference": 0.3},
        "assumptions": {"sd": 1.0},
        "method": "simulation",
        "simulation": {"replicates": replicates, "seed": seed, "chunk_size": 500},
    }


@pytest.fixture
def stack(pg_redis_config):
    from service import create_app

    app = create_app(dict(pg_redis_config, TESTING=True))
    yield Stack(app)
    app.extensions["sizewise"]["engine"].dispose()


def test_a_small_request_behind_a_split_job_ends_first(stack, pg_redis_config, start_worker):
    # Lowered split threshold: the big job is cut into work units on any machine.
    config = dict(pg_redis_config, FANOUT_SPLIT_SECONDS=0.2, FANOUT_HELPERS=1)
    worker = start_worker(config, concurrency=2)
    # The rank-sum test draws every observation: 60,000 replicates at 500 per group take seconds.
    big = stack.submit(_simulated(60_000, 11, 500, "rank_sum"))
    stack.wait(big, until=("running", "computed", "failed"), worker=worker)
    small = stack.submit(_simulated(2_000, 12, 30, "welch_t"))
    done_small = stack.wait(small, timeout=120, worker=worker)
    assert done_small["status"] == "computed", done_small["error"]
    assert stack.get(big)["status"] == "running", "the big job ended before the small request"
    done_big = stack.wait(big, timeout=600, worker=worker)
    assert done_big["status"] == "computed", done_big["error"]
