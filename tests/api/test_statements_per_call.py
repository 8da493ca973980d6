"""How many SQL statements the two busiest calls make, on SQLite and on PostgreSQL.

POST /v1/calculations is answered from the question alone, and an intake form polls
GET /v1/requests/<id> while its request runs; both run on every API process's CPU, so what
they ask the database is counted here (SQLAlchemy's before_cursor_execute on the application's
engine, the real database). A verified token is remembered for TOKEN_CACHE_SECONDS, so its
lookup may or may not fall inside a counted call: statements on api_tokens are left out.
"""

from __future__ import annotations

import re

import pytest
from sqlalchemy import event

from service.store import jobs
from service.store.db import session_scope
from tests.conftest import question_body

TABLE = re.compile(r"\bFROM\s+(\w+)", re.IGNORECASE)


@pytest.fixture
def statements(app):
    """The SQL statements the application's engine runs, except token lookups."""
    seen: list[str] = []

    def count(_conn, _cursor, statement, *_args) -> None:
        if "api_tokens" not in statement:
            seen.append(statement)

    engine = app.extensions["sizewise"]["engine"]
    event.listen(engine, "before_cursor_execute", count)
    yield seen
    event.remove(engine, "before_cursor_execute", count)


def tables(statements: list[str]) -> list[str]:
    """What each statement reads, in order: "request+children" for the request row read with
    whether its result, reruns and explorations exist, else the first table it names."""
    return [
        "request+children"
        if "EXISTS" in s.upper() and re.search(r"\bFROM requests\b", s)
        else TABLE.search(s).group(1)
        for s in statements
    ]


def test_a_calculation_asks_the_database_nothing(client, statements):
    body = {"question": question_body()}
    assert client.post("/v1/calculations", json=body).status_code == 200
    statements.clear()
    reply = client.post("/v1/calculations", json=body)
    assert reply.status_code == 200
    assert reply.get_json()["sample_size"]["per_group"] == [64, 64]
    assert statements == []


def test_polling_a_running_request_reads_the_request_and_its_history(api, statements):
    request_id = api.submit().get_json()["id"]
    with session_scope(api.sessions()) as s:
        assert jobs.claim(s, "request", request_id, "worker-test", 60, 3)
    headers = api.tokens.headers("intake", "a.okafor")
    assert api.client.get(f"/v1/requests/{request_id}", headers=headers).status_code == 200
    statements.clear()
    reply = api.client.get(f"/v1/requests/{request_id}", headers=headers)
    assert reply.status_code == 200
    body = reply.get_json()
    assert body["status"] == "running"
    assert body["result"] is None and body["explorations"] == []
    assert body["reruns"] == {"total": 0, "identical": 0, "different": 0, "latest": None}
    # The owner check is answered from memory after the first poll; the request row says in
    # the same statement that a running request has no result, reruns or explorations.
    assert tables(statements) == ["request+children", "audit_events"]


def test_a_computed_request_adds_its_result_only(api, statements):
    request_id = api.submit().get_json()["id"]
    api.compute_as_worker(request_id)
    headers = api.tokens.headers("intake", "a.okafor")
    api.client.get(f"/v1/requests/{request_id}", headers=headers)
    statements.clear()
    reply = api.client.get(f"/v1/requests/{request_id}", headers=headers)
    assert reply.status_code == 200
    assert reply.get_json()["result"]["sample_size"]["per_group"] == [64, 64]
    assert tables(statements) == ["request+children", "results", "audit_events"]


def test_the_remembered_owner_still_hides_a_request_from_another_intake_token(api):
    request_id = api.submit().get_json()["id"]
    own = api.tokens.headers("intake", "a.okafor")
    other = api.tokens.headers("intake", "b.lindqvist")
    assert api.client.get(f"/v1/requests/{request_id}", headers=own).status_code == 200
    assert api.client.get(f"/v1/requests/{request_id}", headers=other).status_code == 404
    assert api.client.get(f"/v1/requests/{request_id}", headers=own).status_code == 200
