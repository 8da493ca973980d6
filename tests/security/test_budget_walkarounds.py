"""Budgets and limits that could be walked around: explorations, parallel submissions, calls without
a valid token, and self-approval. Both backends (PostgreSQL locks the token row; SQLite has one
writer). The estimates are the engine's own (``estimate_cost``, and ``price`` of the explorations), so each
budget below is set to fit an exact number of simulations.
"""

from __future__ import annotations

import json
import threading
import urllib.error
import urllib.request
from datetime import timedelta

import pytest
from sqlalchemy import func, select, update
from werkzeug.serving import make_server

from service.api.explorations import counterpart_record
from service.engine import compute, estimate_cost
from service.schemas import load_question
from service.schemas.explorations import price
from service.store import jobs
from service.store import tokens as token_store
from service.store.db import session_scope
from service.store.models import Exploration, Request, TokenSpend
from service.store.types import utcnow

PROBLEM = "application/problem+json"


def _token(app, role: str, name: str) -> tuple[str, dict]:
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        token_id, secret = token_store.create_token(session, role, name)
    return token_id, {"Authorization": f"Bearer {secret}"}


def _count(app, model, **where) -> int:
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        query = select(func.count()).select_from(model)
        for column, value in where.items():
            query = query.where(getattr(model, column) == value)
        return session.scalar(query)


def _simulation(replicates: int = 400) -> dict:
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


def _robustness_cost(question: dict) -> int:
    return price(load_question(question), None, {"type": "robustness_panel"}, budget=None)[1]


# --- explorations count against the hourly budget -------------------------------------------------


def test_explorations_attached_to_a_submission_are_charged(make_app, api):
    question = _simulation()
    request_cost = estimate_cost(load_question(question))
    panel_cost = _robustness_cost(question)
    assert request_cost > 0 and panel_cost > 0
    # Room for the request and its panel, less one draw.
    app = make_app(TOKEN_HOURLY_BUDGET=request_cost + panel_cost - 1)
    client = app.test_client()
    token_id, headers = _token(app, "intake", "a.okafor")
    body = api.request_body(question, explorations=[{"type": "robustness_panel"}])
    r = client.post("/v1/requests", json=body, headers=headers)
    assert r.status_code == 429 and r.mimetype == PROBLEM
    problem = r.get_json()
    assert problem["estimate"] == request_cost + panel_cost
    assert problem["remaining"] == request_cost + panel_cost - 1
    # Nothing of it was stored: no request, no exploration, no reservation.
    assert (_count(app, Request), _count(app, Exploration), _count(app, TokenSpend)) == (0, 0, 0)
    # Without the panel it fits; the ledger holds exactly its estimate.
    r = client.post("/v1/requests", json=api.request_body(question), headers=headers)
    assert r.status_code == 202
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        rows = session.execute(select(TokenSpend.kind, TokenSpend.cost, TokenSpend.token_id)).all()
    assert rows == [("request", request_cost, token_id)]


def test_explorations_posted_later_are_charged(make_app, api):
    question = _simulation()
    request_cost = estimate_cost(load_question(question))
    panel_cost = _robustness_cost(question)
    # The request plus exactly one panel fit; a second panel does not.
    app = make_app(TOKEN_HOURLY_BUDGET=request_cost + panel_cost)
    client = app.test_client()
    statistician_id, headers = _token(app, "statistician", "j.moreau")
    r = client.post("/v1/requests", json=api.request_body(question), headers=headers)
    assert r.status_code == 202
    path = f"/v1/requests/{r.get_json()['id']}/explorations"
    assert client.post(path, json={"type": "robustness_panel"}, headers=headers).status_code == 202
    before = _count(app, Exploration)
    r = client.post(path, json={"type": "robustness_panel"}, headers=headers)
    assert r.status_code == 429 and r.get_json()["remaining"] == 0
    assert _count(app, Exploration) == before
    assert _count(app, TokenSpend, token_id=statistician_id) == 2
    # Another statistician has a budget of their own.
    _id, other = _token(app, "statistician", "l.park")
    assert client.post(path, json={"type": "robustness_panel"}, headers=other).status_code == 202
    # A sensitivity grid over the simulated request simulates every cell: charged too.
    grid = {"type": "sensitivity_grid", "grid": {"effect.difference": [0.4, 0.5, 0.6]}}
    r = client.post(path, json=grid, headers=headers)
    assert r.status_code == 429
    # Spending older than the hour no longer counts.
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        session.execute(update(TokenSpend).values(spent_at=utcnow() - timedelta(hours=2)))
    assert client.post(path, json={"type": "robustness_panel"}, headers=headers).status_code == 202


def test_panel_of_a_sample_size_question_is_priced_at_the_formula_n(make_app, api):
    question = dict(_simulation(), find="sample_size")
    question.pop("sample_size")
    q = load_question(question)
    record = counterpart_record(q)
    assert record is not None
    panel = price(q, record, {"type": "robustness_panel", "replicates": 400}, budget=None)[1]
    request_cost = estimate_cost(q)
    app = make_app(TOKEN_HOURLY_BUDGET=request_cost + panel - 1)
    _id, headers = _token(app, "intake", "a.okafor")
    body = api.request_body(question, explorations=[{"type": "robustness_panel"}])
    r = app.test_client().post("/v1/requests", json=body, headers=headers)
    assert r.status_code == 429 and r.get_json()["estimate"] == request_cost + panel


def test_reruns_are_charged_to_the_auditor(make_app, api):
    question = _simulation()
    cost = estimate_cost(load_question(question))
    app = make_app(TOKEN_HOURLY_BUDGET=cost)
    client = app.test_client()
    _id, intake = _token(app, "intake", "a.okafor")
    request_id = client.post("/v1/requests", json=api.request_body(question), headers=intake)
    request_id = request_id.get_json()["id"]
    sessions = app.extensions["sizewise"]["sessions"]
    with session_scope(sessions) as session:
        assert jobs.claim(session, "request", request_id, "w", 60, 3)
        record = compute(session.get(Request, request_id).question)
        assert jobs.finish_request(session, request_id, "w", record)
    auditor_id, auditor = _token(app, "auditor", "k.ito")
    path = f"/v1/requests/{request_id}/reruns"
    assert client.post(path, headers=auditor).status_code == 202
    assert client.post(path, headers=auditor).status_code == 429
    assert _count(app, TokenSpend, token_id=auditor_id) == 1


# --- the check and the reservation are one step -----------------------------------------------


def _post(url: str, body: dict, headers: dict) -> int:
    data = json.dumps(body).encode()
    req = urllib.request.Request(
        url, data=data, headers={"Content-Type": "application/json", **headers}, method="POST"
    )
    try:
        with urllib.request.urlopen(req, timeout=120) as response:
            return response.status
    except urllib.error.HTTPError as exc:
        return exc.code


@pytest.mark.parametrize("fits", [13, 1])
def test_parallel_submissions_cannot_pass_the_budget(make_app, api, fits):
    # 13 of 20 is the reported case; 1 of 20 puts every submission at the budget's edge at once.
    question = _simulation()
    cost = estimate_cost(load_question(question))
    app = make_app(TOKEN_HOURLY_BUDGET=fits * cost + cost // 2)
    token_id, headers = _token(app, "intake", "a.okafor")
    # A real threaded HTTP server: 20 clients at once, each its own connection and transaction.
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    url = f"http://127.0.0.1:{server.server_port}/v1/requests"
    start = threading.Barrier(20)
    codes: list[int] = []

    def submit() -> None:
        start.wait()
        codes.append(_post(url, api.request_body(question), headers))

    workers = [threading.Thread(target=submit) for _ in range(20)]
    try:
        for worker in workers:
            worker.start()
        for worker in workers:
            worker.join(180)
    finally:
        server.shutdown()
        thread.join(10)
    assert sorted(codes) == [202] * fits + [429] * (20 - fits)
    assert _count(app, Request) == fits
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        spent = session.scalar(
            select(func.sum(TokenSpend.cost)).where(TokenSpend.token_id == token_id)
        )
    assert spent == fits * cost


# --- calls without a valid token are rate-limited by address ----------------------------------


def test_calls_without_a_valid_token_are_rate_limited(make_app, api):
    app = make_app(RATE_LIMIT="3 per hour")
    client = app.test_client()
    # No token, a malformed header, an unknown token: all 401, all counted against the address.
    attempts = [{}, {"Authorization": "Basic eDp5"}, {"Authorization": "Bearer sw_" + "x" * 43}]
    assert [client.get("/v1/catalogue", headers=h).status_code for h in attempts] == [401] * 3
    r = client.get("/v1/catalogue", headers={"Authorization": "Bearer sw_guess"})
    assert r.status_code == 429 and r.mimetype == PROBLEM
    assert "per address" in r.get_json()["detail"] and int(r.headers["Retry-After"]) > 0
    # Guessing report-link signatures is counted the same way.
    link = f"{'a' * 32}.{2_000_000_000}.{'0' * 64}"
    r = client.get(f"/v1/requests/{'a' * 32}/report", query_string={"link": link})
    assert r.status_code == 429
    # Another address has its own count, and a valid token its own bucket.
    other = app.test_client()
    other.environ_base["REMOTE_ADDR"] = "10.0.0.7"
    assert other.get("/v1/catalogue").status_code == 401
    _id, headers = _token(app, "auditor", "k.ito")
    assert client.get("/v1/catalogue", headers=headers).status_code == 200


# --- four eyes --------------------------------------------------------------------------------


def _computed(app, client, api, headers) -> str:
    r = client.post("/v1/requests", json=api.request_body(), headers=headers)
    assert r.status_code == 202
    request_id = r.get_json()["id"]
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        assert jobs.claim(session, "request", request_id, "w", 60, 3)
        record = compute(session.get(Request, request_id).question)
        assert jobs.finish_request(session, request_id, "w", record)
    return request_id


def test_the_submitter_cannot_approve(make_app, api):
    app = make_app()
    client = app.test_client()
    _id, moreau = _token(app, "statistician", "j.moreau")
    request_id = _computed(app, client, api, moreau)
    path = f"/v1/requests/{request_id}/approve"
    r = client.post(path, json={"note": "Checked."}, headers=moreau)
    assert r.status_code == 403 and r.mimetype == PROBLEM
    assert (
        r.get_json()["type"].endswith("four-eyes")
        and "another statistician" in (r.get_json()["detail"])
    )
    # The same person with a second token (an intake one submitted, a statistician one approves).
    _id, intake_moreau = _token(app, "intake", "J.Moreau")
    _id, second_token = _token(app, "statistician", "j.moreau")
    other_request = _computed(app, client, api, intake_moreau)
    r = client.post(
        f"/v1/requests/{other_request}/approve", json={"note": "ok"}, headers=second_token
    )
    assert r.status_code == 403
    # Returning their own request is allowed (it approves nothing).
    r = client.post(
        f"/v1/requests/{other_request}/return", json={"note": "SD?"}, headers=second_token
    )
    assert r.status_code == 200
    # A second statistician approves.
    _id, park = _token(app, "statistician", "l.park")
    r = client.post(path, json={"note": "Checked."}, headers=park)
    assert r.status_code == 200 and r.get_json()["status"] == "approved"


def test_four_eyes_can_be_turned_off(make_app, api):
    app = make_app(FOUR_EYES=False)
    client = app.test_client()
    _id, moreau = _token(app, "statistician", "j.moreau")
    request_id = _computed(app, client, api, moreau)
    r = client.post(f"/v1/requests/{request_id}/approve", json={"note": "ok"}, headers=moreau)
    assert r.status_code == 200


def test_unauthenticated_calls_are_counted_while_the_shared_store_is_down(make_app):
    # Nothing listens on this port: the counters fall back to this process, never to a 500.
    app = make_app(RATE_LIMIT="2 per hour", RATELIMIT_STORAGE_URL="redis://127.0.0.1:6399/0")
    client = app.test_client()
    assert [client.get("/v1/catalogue").status_code for _ in range(3)] == [401, 401, 429]
