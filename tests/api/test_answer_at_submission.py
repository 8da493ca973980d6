"""Closed-form questions are answered by the API at submission; simulations still queue.

The reference is the engine itself: the stored record must be the record ``compute`` returns for
the stored question, and the request must carry the same audit trail as one computed by a
worker (less the 'published' event, since nothing goes to the broker). Runs on SQLite and
PostgreSQL (``database_url``). Demo data: Northbridge General Hospital, invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from statsmodels.stats.power import TTestIndPower

from service import create_app
from service.api.publishing import api_owner
from service.engine import canonical_json, compute
from service.store.db import session_scope
from service.store.models import Exploration
from workers.tasks import answer_in_transaction, run_request_job


@pytest.fixture
def live_app(settings):
    """The application with the default behaviour: closed-form answers at submission."""
    application = create_app(dict(settings, ANSWER_AT_SUBMISSION=True))
    yield application
    application.extensions["sizewise"]["engine"].dispose()


@pytest.fixture
def live_api(live_app, api, tokens):
    """The ``api`` helpers bound to ``live_app``."""
    return type(api)(live_app.test_client(), live_app, type(tokens)(live_app))


def question_body(**overrides) -> dict:
    question = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
    }
    question.update(overrides)
    return question


def _messages(settings) -> list[dict]:
    queue = Path(settings["BROKER_URL"].removeprefix("filesystem://")) / "queue"
    if not queue.exists():
        return []
    return [json.loads(p.read_text()) for p in sorted(queue.iterdir())]


def _task_names(settings) -> list[str]:
    return [m["headers"]["task"] for m in _messages(settings)]


def test_analytic_question_comes_back_computed_with_the_engine_record(live_api, settings):
    r = live_api.submit(live_api.request_body(question_body()))
    assert r.status_code == 202, r.get_json()
    body = r.get_json()
    assert body["status"] == "computed" and body["progress"] == 1.0
    # Reference: d = 0.5, two-sided 5%, 80% power; the noncentral t solved by statsmodels.
    n = TTestIndPower().solve_power(effect_size=0.5, alpha=0.05, power=0.8)
    assert body["result"]["sample_size"]["per_group"] == [64, 64] == [round(n + 0.5)] * 2
    # The stored record is exactly the engine's record for the stored question.
    direct = compute(body["question"])
    assert canonical_json(body["result"]) == canonical_json(direct)
    # Nothing was handed to the broker.
    assert _task_names(settings) == []
    assert body["published_at"] is None


def test_audit_trail_matches_a_worker_computed_request(live_api, api, app, settings):
    # The same question computed by a worker (the API with answers at submission off).
    queued = api.submit(api.request_body(question_body())).get_json()
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(queued["id"], config) == "computed"
    worker = api.client.get(f"/v1/requests/{queued['id']}").get_json()

    answered = live_api.submit(live_api.request_body(question_body())).get_json()
    assert [e["action"] for e in worker["history"]] == [
        "submitted",
        "published",
        "running",
        "computed",
    ]
    assert [e["action"] for e in answered["history"]] == ["submitted", "running", "computed"]
    running, computed = answered["history"][1:]
    # As on a worker: "running" by the process (api:<host>), "computed" by the lease owner.
    assert running["actor"].startswith("api:") and running["actor"].count(":") == 1
    assert computed["actor"] == running["detail"]["owner"]
    assert worker["history"][3]["actor"] == worker["history"][2]["detail"]["owner"]
    assert running["detail"]["attempt"] == 1
    assert computed["detail"]["result"] == "stored"
    # The same question, the same sealed record and hash, whoever computed it.
    assert canonical_json(answered["result"]) == canonical_json(worker["result"])
    assert (
        computed["detail"]["record_sha256"]
        == worker["history"][3]["detail"]["record_sha256"]
        == answered["result"]["reproducibility"]["record_sha256"]
    )


def test_simulation_question_is_still_queued(live_api, settings):
    question = question_body(
        method="simulation", simulation={"replicates": 1000, "search_replicates": 500}
    )
    body = live_api.submit(live_api.request_body(question)).get_json()
    assert body["status"] == "queued" and body["result"] is None
    assert _task_names(settings) == ["sizewise.run_request"]


def test_explorations_posted_with_an_analytic_request_are_handed_to_the_queue(live_api, settings):
    grid = {"type": "sensitivity_grid", "grid": {"effect.difference": [0.4, 0.6]}}
    body = live_api.submit(live_api.request_body(question_body(), explorations=[grid])).get_json()
    assert body["status"] == "computed"
    (exploration,) = body["explorations"]
    # The request is computed, so its exploration is published for a worker at once.
    assert _task_names(settings) == ["sizewise.run_exploration"]
    assert _messages(settings)[0]["headers"]["argsrepr"] == repr([exploration["id"]])
    with session_scope(live_api.sessions()) as session:
        row = session.get(Exploration, exploration["id"])
        assert row.status == "queued" and row.published_at is not None


def test_an_answer_is_stored_only_for_the_question_it_answers(api, app):
    # The API stores the record it computed while checking the submission, so the question is
    # computed once; a record of any other question must never be stored instead.
    config = app.extensions["sizewise"]["config"]
    queued = api.submit(api.request_body(question_body())).get_json()
    other = compute(
        dict(queued["question"], effect=dict(queued["question"]["effect"], difference=0.4))
    )
    with session_scope(api.sessions()) as session:
        assert (
            answer_in_transaction(session, queued["id"], config, owner=api_owner(), answer=other)
            is None
        )
    left = api.client.get(f"/v1/requests/{queued['id']}").get_json()
    assert left["status"] == "queued" and left["result"] is None
    assert [e["action"] for e in left["history"]] == ["submitted", "published"]
    # The matching record is stored as is: the same digits the engine gives for the question.
    answer = compute(queued["question"])
    with session_scope(api.sessions()) as session:
        waiting = answer_in_transaction(
            session, queued["id"], config, owner=api_owner(), answer=answer
        )
    assert waiting == []
    stored = api.client.get(f"/v1/requests/{queued['id']}").get_json()["result"]
    assert canonical_json(stored) == canonical_json(answer)
    assert stored["sample_size"]["per_group"] == [64, 64]  # statsmodels' 63.77 rounded up (above)


def test_an_analytic_submission_is_stored_and_answered_in_one_commit(live_api, live_app):
    # The request, its claim, its three chained events and its record are one transaction: one
    # writing commit (one WAL flush on PostgreSQL), so no reader ever sees the request computed
    # without its record and no event can be durable without the others. Counted on the real
    # database's connection events; the answer's GET-like rendering is a read-only transaction.
    from sqlalchemy import event

    engine = live_app.extensions["sizewise"]["engine"]
    live_api.submit(live_api.request_body(question_body()))  # tokens issued, caches warm
    transactions: list[list[str]] = [[]]
    locks: list[str] = []

    def statement(conn, cursor, sql, params, context, executemany):
        transactions[-1].append(sql.split(None, 1)[0].upper())
        if "pg_advisory_xact_lock" in sql:
            locks.append(sql)

    def commit(conn):
        transactions.append([])

    event.listen(engine, "before_cursor_execute", statement)
    event.listen(engine, "commit", commit)
    try:
        body = live_api.submit(live_api.request_body(question_body())).get_json()
    finally:
        event.remove(engine, "before_cursor_execute", statement)
        event.remove(engine, "commit", commit)
    assert body["status"] == "computed"
    writing = [t for t in transactions if {"INSERT", "UPDATE", "DELETE"} & set(t)]
    assert len(writing) == 1, transactions
    # submitted, running, computed: three audit rows (plus the request and its result).
    assert writing[0].count("INSERT") == 5
    # On PostgreSQL the chain's lock is asked for once per transaction, not once per event.
    assert len(locks) == (1 if engine.dialect.name == "postgresql" else 0)
    assert [e["action"] for e in body["history"]] == ["submitted", "running", "computed"]


def test_a_failure_while_answering_leaves_the_request_stored_and_queued(
    live_api, settings, monkeypatch
):
    # Fault injection: storing the record breaks. The savepoint it ran in is rolled back (no
    # 'running' event, no claim left behind) and the received request goes to the queue.
    from service.store import jobs

    def broken(*args, **kwargs):
        raise RuntimeError("injected failure while storing the record")

    monkeypatch.setattr(jobs, "finish_request", broken)
    r = live_api.submit(live_api.request_body(question_body()))
    assert r.status_code == 202, r.get_json()
    body = r.get_json()
    assert body["status"] == "queued" and body["result"] is None
    assert [e["action"] for e in body["history"]] == ["submitted", "published"]
    assert _task_names(settings) == ["sizewise.run_request"]
