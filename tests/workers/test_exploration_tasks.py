"""Exploration jobs: direct task-function calls on SQLite, and one real worker on PostgreSQL/Redis.

Invented demo data (Northbridge General Hospital research office).
"""

from __future__ import annotations

import copy
import random
import time
from datetime import timedelta

import pytest
from sqlalchemy import select, update
from statsmodels.stats.power import TTestIndPower
from workers_testkit import Stack, insert_request, two_groups_question

from service.engine import canonical_json, compute
from service.store import explorations, jobs
from service.store.db import session_scope
from service.store.models import ChunkResult, Exploration, Request
from service.store.types import utcnow
from tests.conftest import question_body
from workers import sweeper
from workers.exploration_tasks import run_exploration_job
from workers.tasks import run_helper_job, run_request_job

GRID = {"effect.difference": [0.3, 0.6]}


def _simulated(**kw) -> dict:
    return two_groups_question(method="simulation", replicates=1000, chunk_size=250, **kw)


def _exploration(factory, request_id: str, type_: str, params: dict) -> str:
    with session_scope(factory) as session:
        return explorations.create_exploration(
            session, request_id, type_, params, "j.moreau (statistician)"
        ).id


def _row(factory, exploration_id: str) -> Exploration:
    with session_scope(factory) as session:
        return session.get(Exploration, exploration_id)


def _shuffled(seed: int):
    rng = random.Random(seed)

    def order(indices: list[int]) -> list[int]:
        rng.shuffle(indices)
        return indices

    return order


def test_an_exploration_waits_for_its_request_then_the_sweeper_publishes_it(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question())
    exploration_id = _exploration(factory, request_id, "sensitivity_grid", {"grid": GRID})
    assert run_exploration_job(exploration_id, sqlite_config) == "waiting"
    row = _row(factory, exploration_id)
    assert (row.status, row.attempts, row.published_at) == ("queued", 0, None)
    later = utcnow() + timedelta(minutes=5)
    with session_scope(factory) as session:
        assert ("exploration", exploration_id, None) not in jobs.stale_jobs(session, later)
    # The broker is down when the request finishes, so the exploration stays unpublished ...
    dead_broker = dict(sqlite_config, BROKER_URL="redis://127.0.0.1:1/0")
    assert run_request_job(request_id, dead_broker) == "computed"
    assert _row(factory, exploration_id).published_at is None
    with session_scope(factory) as session:
        assert ("exploration", exploration_id, None) in jobs.stale_jobs(session, later)
    # ... and the sweeper hands it over once the broker answers.
    assert sweeper.sweep_once(sqlite_config, now=later) >= 1
    assert _row(factory, exploration_id).published_at is not None
    assert run_exploration_job(exploration_id, sqlite_config) == "done"
    assert (
        run_exploration_job(exploration_id, sqlite_config) == "skipped"
    )  # a second delivery is quiet
    cells = _row(factory, exploration_id).result["cells"]
    for cell in cells:
        # formula: noncentral t power at n = 30 per group (statsmodels)
        exact = TTestIndPower().power(
            effect_size=cell["values"]["effect.difference"], nobs1=30, alpha=0.05, ratio=1.0
        )
        assert cell["power"] == pytest.approx(exact, abs=1e-6)


def test_waiting_explorations_are_published_when_their_request_is_computed(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question())
    exploration_id = _exploration(factory, request_id, "sensitivity_grid", {"grid": GRID})
    assert run_exploration_job(exploration_id, sqlite_config) == "waiting"
    assert _row(factory, exploration_id).published_at is None
    assert run_request_job(request_id, sqlite_config) == "computed"
    assert _row(factory, exploration_id).published_at is not None  # no wait for the next sweep
    assert run_exploration_job(exploration_id, sqlite_config) == "done"


def test_a_simulated_grid_fans_out_and_its_digits_depend_only_on_the_cell(sqlite_config, factory):
    question = _simulated()
    request_id = insert_request(factory, question)
    assert run_request_job(request_id, sqlite_config) == "computed"
    first = _exploration(factory, request_id, "sensitivity_grid", {"grid": GRID})
    second = _exploration(factory, request_id, "sensitivity_grid", {"grid": GRID})
    assert run_exploration_job(first, sqlite_config) == "done"
    # Another order of the chunks, another worker: the same digits.
    assert run_exploration_job(second, sqlite_config, order=_shuffled(3)) == "done"
    a, b = _row(factory, first).result, _row(factory, second).result
    assert canonical_json(a) == canonical_json(b)
    for cell in a["cells"]:
        q = copy.deepcopy(question)
        q["effect"]["difference"] = cell["values"]["effect.difference"]
        record = compute(q)  # the cell asked alone, with the request's seed
        assert (
            cell["power"] == record["power"]["estimate"] and cell["mcse"] == record["power"]["mcse"]
        )
    with session_scope(factory) as session:
        left = session.scalars(select(ChunkResult.job_kind).where(ChunkResult.job_id == first))
        assert list(left) == []  # the exploration ended: its work units are gone


def test_a_helper_only_helps_a_running_exploration(sqlite_config, factory):
    request_id = insert_request(factory, _simulated())
    exploration_id = _exploration(factory, request_id, "sensitivity_grid", {"grid": GRID})
    assert run_helper_job("exploration", exploration_id, sqlite_config) == "skipped"


def test_robustness_of_a_simulated_request(sqlite_config, factory):
    question = _simulated()
    request_id = insert_request(factory, question)
    assert run_request_job(request_id, sqlite_config) == "computed"
    exploration_id = _exploration(
        factory, request_id, "robustness_panel", {"replicates": 1000, "seed": 99}
    )
    assert run_exploration_job(exploration_id, sqlite_config) == "done"
    panel = _row(factory, exploration_id).result
    assert panel["per_group"] == [30, 30] and panel["seed"] == 99
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    # formula: noncentral t power at d = 0.5, n = 30 per group (statsmodels): 0.478
    exact = TTestIndPower().power(effect_size=0.5, nobs1=30, alpha=0.05, ratio=1.0)
    assert abs(normal["power"]["estimate"] - exact) < 4 * normal["power"]["mcse"]


def test_an_exploration_of_a_failed_request_fails_with_the_reason(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question(), status="failed")
    exploration_id = _exploration(factory, request_id, "sensitivity_grid", {"grid": GRID})
    with session_scope(factory) as session:
        assert ("exploration", exploration_id, None) in jobs.stale_jobs(
            session, utcnow() + timedelta(minutes=1)
        )
    assert run_exploration_job(exploration_id, sqlite_config) == "failed"
    row = _row(factory, exploration_id)
    assert row.status == "failed" and "ended 'failed' without a result" in row.error


def test_the_worker_prices_the_exploration_again(sqlite_config, factory):
    request_id = insert_request(factory, _simulated())
    assert run_request_job(request_id, sqlite_config) == "computed"
    exploration_id = _exploration(
        factory, request_id, "robustness_panel", {"replicates": 1000, "seed": 1}
    )
    config = dict(sqlite_config, SIMULATION_BUDGET=1000)
    assert run_exploration_job(exploration_id, config) == "failed"
    assert "exceeds the per-simulation budget of 1,000" in _row(factory, exploration_id).error


def test_an_abandoned_exploration_is_swept_and_taken_over(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question())
    assert run_request_job(request_id, sqlite_config) == "computed"
    exploration_id = _exploration(factory, request_id, "sensitivity_grid", {"grid": GRID})
    with session_scope(factory) as session:
        assert jobs.claim(session, "exploration", exploration_id, "worker:dead", 30, 3)
        session.execute(
            update(Exploration)
            .where(Exploration.id == exploration_id)
            .values(lease_expires_at=utcnow() - timedelta(seconds=1))
        )
    with session_scope(factory) as session:
        assert ("exploration", exploration_id, None) in jobs.stale_jobs(session, utcnow())
    assert run_exploration_job(exploration_id, sqlite_config) == "done"
    assert _row(factory, exploration_id).attempts == 2


# --- a real worker ---------------------------------------------------------------------------


@pytest.mark.services
@pytest.mark.slow
def test_a_real_worker_runs_the_explorations_posted_with_a_simulated_request(
    pg_redis_config, start_worker
):
    from service import create_app

    app = create_app(dict(pg_redis_config, TESTING=True))
    try:
        stack = Stack(app)
        worker = start_worker(pg_redis_config, concurrency=2)
        reply = stack.client.post(
            "/v1/requests",
            json={
                "protocol": {"id": "NGH-2024-044", "title": "Nurse-led discharge calls"},
                "requester": {
                    "name": "Dr. Mira Castell",
                    "email": "m.castell@northbridge.example",
                    "department": "Cardiology",
                },
                "question": question_body(
                    find="power",
                    sample_size={"per_group": [30, 30]},
                    method="simulation",
                    simulation={"replicates": 2000, "seed": 20240611, "chunk_size": 500},
                ),
                "explorations": [
                    {"type": "sensitivity_grid", "grid": GRID},
                    {"type": "robustness_panel"},
                ],
            },
        )
        assert reply.status_code == 202, reply.get_json()
        request_id = reply.get_json()["id"]
        assert stack.wait(request_id, worker=worker)["status"] == "computed"
        deadline = time.monotonic() + 120
        while True:
            items = stack.client.get(f"/v1/requests/{request_id}/explorations").get_json()["items"]
            if all(e["status"] in ("done", "failed") for e in items):
                break
            assert time.monotonic() < deadline, (items, worker.tail())
            time.sleep(0.5)
        assert [e["status"] for e in items] == ["done", "done"], [e["error"] for e in items]
        grid = items[0]["result"]
        question = stack.get(request_id)["question"]
        for cell in grid["cells"]:
            q = copy.deepcopy(question)
            q["effect"]["difference"] = cell["values"]["effect.difference"]
            assert cell["power"] == compute(q)["power"]["estimate"]  # same digits as in-process
        factory = app.extensions["sizewise"]["sessions"]
        with session_scope(factory) as session:
            rows = session.scalars(
                select(ChunkResult.status).where(
                    ChunkResult.job_kind == jobs.job_kind("exploration").unit_key,
                    ChunkResult.job_id == items[0]["id"],
                )
            ).all()
            # Work units live only while their job runs: nothing stale is left behind.
            assert rows == []
            assert session.get(Request, request_id).status == "computed"
    finally:
        app.extensions["sizewise"]["engine"].dispose()
