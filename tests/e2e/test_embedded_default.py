"""The embedded default, end to end: a SQLite file and the filesystem:// broker, no servers.

This is how one statistician runs sizewise on a laptop: the Flask API and a real `celery worker`
subprocess share a SQLite file (WAL) and a broker folder.
"""

from __future__ import annotations

import pytest
from statsmodels.stats.power import TTestIndPower
from workers_testkit import Stack, canonical

from service.engine import compute

pytestmark = pytest.mark.slow


@pytest.fixture
def stack(embedded_config):
    from service import create_app

    app = create_app(dict(embedded_config, TESTING=True))
    yield Stack(app)
    app.extensions["sizewise"]["engine"].dispose()


def test_analytic_and_simulated_requests_flow_through_sqlite_and_the_folder_broker(
    stack, embedded_config, start_worker
):
    worker = start_worker(embedded_config, concurrency=2)
    # n per group for d = 0.5, power .80, two-sided alpha .05: 64 (published: Cohen 1988,
    # Table 2.4.1; recomputed with statsmodels TTestIndPower.solve_power -> 63.77, ceiling 64).
    raw_n = TTestIndPower().solve_power(effect_size=0.5, power=0.8, alpha=0.05, ratio=1.0)
    analytic = stack.submit(
        {
            "outcome": "continuous",
            "layout": "two_groups",
            "find": "sample_size",
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1.0},
        }
    )
    simulated = stack.submit(
        {
            "outcome": "continuous",
            "layout": "two_groups",
            "find": "power",
            "sample_size": {"per_group": [30, 30]},
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1.0},
            "method": "simulation",
            "simulation": {"replicates": 3000, "seed": 424242, "chunk_size": 500},
        }
    )
    body = stack.wait(analytic, worker=worker)
    assert body["status"] == "computed", body["error"]
    assert body["result"]["sample_size"]["per_group"] == [64, 64]
    assert round(raw_n, 2) == 63.77
    body = stack.wait(simulated, worker=worker)
    assert body["status"] == "computed", body["error"]
    assert canonical(body["result"]) == canonical(compute(body["question"]))
    rerun = stack.rerun(simulated, worker=worker)
    assert rerun["status"] == "done" and rerun["identical"] is True, rerun
