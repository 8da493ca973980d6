"""Per-token rate limit, per-token hourly cost budget and the per-simulation budget at intake."""

from __future__ import annotations

import os
from datetime import timedelta
from pathlib import Path

import pytest
from prometheus_client import REGISTRY
from sqlalchemy import update

from service.api.auth import storage_url
from service.engine import estimate_cost
from service.schemas import load_question
from service.store.db import session_scope
from service.store.models import TokenSpend
from service.store.types import utcnow

PROBLEM = "application/problem+json"


def _headers(app, role: str, name: str) -> dict:
    from service.store import tokens

    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        _id, secret = tokens.create_token(session, role, name)
    return {"Authorization": f"Bearer {secret}"}


def test_rate_limit_is_per_token_and_answers_problem_json(make_app):
    # "per hour", not "per minute": the window cannot roll over mid-test on a slow machine.
    app = make_app(RATE_LIMIT="3 per hour")
    client = app.test_client()
    first, second = _headers(app, "auditor", "one"), _headers(app, "auditor", "two")
    assert [client.get("/v1/catalogue", headers=first).status_code for _ in range(3)] == [200] * 3
    r = client.get("/v1/requests", headers=first)  # one budget across all endpoints
    assert r.status_code == 429 and r.mimetype == PROBLEM
    body = r.get_json()
    assert body["status"] == 429 and "3 per 1 hour" in body["detail"]
    assert int(r.headers["Retry-After"]) > 0
    assert client.get("/v1/catalogue", headers=second).status_code == 200
    # The probes are never limited.
    assert all(client.get("/healthz").status_code == 200 for _ in range(5))


def test_rate_limit_storage_is_shared_by_default(tmp_path, monkeypatch):
    monkeypatch.setenv("SIZEWISE_VAR_DIR", str(tmp_path))
    # Empty (the default): a file every process on the host opens, or the Redis broker.
    assert storage_url({"RATELIMIT_STORAGE_URL": "", "BROKER_URL": "filesystem://"}) == (
        f"sizewise+sqlite://{tmp_path / 'ratelimit.sqlite'}"
    )
    redis = "redis://127.0.0.1:6379/0"
    assert storage_url({"RATELIMIT_STORAGE_URL": "", "BROKER_URL": redis}) == redis
    other = "redis://127.0.0.1:6379/5"
    assert storage_url({"RATELIMIT_STORAGE_URL": other, "BROKER_URL": redis}) == other
    # Per-process counting only when asked for by name.
    assert storage_url({"RATELIMIT_STORAGE_URL": "memory://", "BROKER_URL": redis}) == "memory://"


def _simulation(replicates: int = 1000) -> dict:
    return {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"per_group": [30, 30]},
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1},
        "method": "simulation",
        "simulation": {"replicates": replicates, "seed": 20250611},
    }


@pytest.fixture
def _body(api):
    """A full submission around ``question`` (the shared Northbridge request body)."""
    return api.request_body


def test_hourly_budget_per_token(make_app, _body):
    estimate = estimate_cost(load_question(_simulation()))
    assert estimate > 0
    # Room for two of these simulations, not three.
    app = make_app(TOKEN_HOURLY_BUDGET=int(2.5 * estimate))
    client = app.test_client()
    okafor, park = _headers(app, "intake", "a.okafor"), _headers(app, "intake", "l.park")
    for _ in range(2):
        assert (
            client.post("/v1/requests", json=_body(_simulation()), headers=okafor).status_code
            == 202
        )
    r = client.post("/v1/requests", json=_body(_simulation()), headers=okafor)
    assert r.status_code == 429 and r.mimetype == PROBLEM
    body = r.get_json()
    remaining = int(2.5 * estimate) - 2 * estimate
    assert (body["estimate"], body["remaining"]) == (estimate, remaining)
    assert f"{estimate:,}" in body["detail"] and f"{remaining:,}" in body["detail"]
    assert 0 < int(r.headers["Retry-After"]) <= 3600
    # Analytic questions cost no draws; another token has its own budget.
    analytic = _body(
        {
            "outcome": "association",
            "layout": "single_group",
            "find": "sample_size",
            "effect": {"r": 0.3},
        }
    )
    assert client.post("/v1/requests", json=analytic, headers=okafor).status_code == 202
    assert client.post("/v1/requests", json=_body(_simulation()), headers=park).status_code == 202
    # Spending older than an hour no longer counts.
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        session.execute(update(TokenSpend).values(spent_at=utcnow() - timedelta(hours=2)))
    assert client.post("/v1/requests", json=_body(_simulation()), headers=okafor).status_code == 202


def test_over_budget_simulation_is_refused_at_intake(make_app, settings, _body):
    question = _simulation(replicates=5000)
    estimate = estimate_cost(load_question(question))
    app = make_app(SIMULATION_BUDGET=estimate - 1)
    client = app.test_client()
    headers = _headers(app, "statistician", "j.moreau")
    refusals = {"budget": "per_simulation"}
    before = REGISTRY.get_sample_value("sizewise_budget_refusals_total", refusals) or 0
    r = client.post("/v1/requests", json=_body(question), headers=headers)
    assert r.status_code == 422 and r.mimetype == PROBLEM
    # Operators see it on /metrics (this process's registry).
    assert REGISTRY.get_sample_value("sizewise_budget_refusals_total", refusals) == before + 1
    errors = r.get_json()["errors"]
    assert list(errors) == ["question.simulation.replicates"]
    assert f"{estimate:,}" in errors["question.simulation.replicates"][0]
    # Refused before anything was stored or queued.
    assert client.get("/v1/requests", headers=headers).get_json()["total"] == 0
    queue = Path(settings["BROKER_URL"].removeprefix("filesystem://")) / "queue"
    assert not queue.exists() or not any(queue.iterdir())
    ok = client.post("/v1/requests", json=_body(_simulation(replicates=1000)), headers=headers)
    assert ok.status_code == 202


@pytest.mark.services
def test_rate_limit_counts_are_shared_through_a_redis_broker(make_app):
    if os.environ.get("SIZEWISE_SKIP_SERVICES") == "1":
        pytest.skip("SIZEWISE_SKIP_SERVICES=1")
    # Two applications stand for two API processes; the counter lives in Redis, not in either.
    redis = "redis://127.0.0.1:6379/0"
    first = make_app(BROKER_URL=redis, RATE_LIMIT="2 per minute", RATELIMIT_STORAGE_URL="")
    second = make_app(BROKER_URL=redis, RATE_LIMIT="2 per minute", RATELIMIT_STORAGE_URL="")
    headers = _headers(first, "auditor", "shared")
    assert first.test_client().get("/v1/catalogue", headers=headers).status_code == 200
    assert second.test_client().get("/v1/catalogue", headers=headers).status_code == 200
    r = first.test_client().get("/v1/catalogue", headers=headers)
    assert r.status_code == 429 and r.mimetype == PROBLEM
