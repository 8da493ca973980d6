"""Notifications delivered by a real `celery worker` process: embedded default and PostgreSQL + Redis.

The API (Flask test client on the same database) registers a callback on a loopback receiver and
submits a question; the worker computes it, its courier thread posts the signed notification,
the receiver answers 500 once, and the retry succeeds with the same message id.
"""

from __future__ import annotations

import time

import pytest
from test_integration import _posted
from workers_testkit import Stack

from tests.webhook_receiver import Receiver

pytestmark = [pytest.mark.slow]


def _run(config: dict, start_worker, monkeypatch) -> None:
    from service import create_app

    # The worker reads these from its environment (the test config's own keys are passed on).
    monkeypatch.setenv("SIZEWISE_WEBHOOK_POLL_SECONDS", "0.2")
    monkeypatch.setenv("SIZEWISE_WEBHOOK_BACKOFF_SECONDS", "0.2")
    config = dict(config, ANSWER_AT_SUBMISSION=False)
    worker = start_worker(config)
    app = create_app(dict(config, TESTING=True, WEBHOOK_ALLOW_HTTP=True))
    try:
        stack = Stack(app)
        with Receiver(codes=[500]) as receiver:
            reply = stack.client.put("/v1/webhook", json={"url": receiver.url})
            assert reply.status_code == 201, reply.get_json()
            receiver.secret = reply.get_json()["secret"]
            request_id = stack.submit(_posted())
            body = stack.wait(request_id, worker=worker)
            assert body["status"] == "computed", body["error"]
            deadline = time.monotonic() + 60
            while not receiver.effects and time.monotonic() < deadline:
                time.sleep(0.2)
        assert receiver.effects, f"no notification delivered\n{worker.tail()}"
        first, second = receiver.received[:2]
        assert first["verified"] and second["verified"]
        assert (first["code"], second["code"]) == (500, 204)
        assert first["id"] == second["id"]
        (payload,) = receiver.effects.values()
        assert payload["type"] == "request.computed" and payload["data"]["id"] == request_id
        log = stack.client.get(f"/v1/requests/{request_id}/deliveries").get_json()["items"]
        assert [a["status_code"] for a in log[0]["attempts"]] == [500, 204]
        assert log[0]["status"] == "delivered"
    finally:
        app.extensions["sizewise"]["engine"].dispose()


def test_the_embedded_worker_delivers_and_retries(embedded_config, start_worker, monkeypatch):
    _run(embedded_config, start_worker, monkeypatch)


@pytest.mark.services
def test_a_worker_on_postgres_and_redis_delivers_and_retries(
    pg_redis_config, start_worker, monkeypatch
):
    _run(pg_redis_config, start_worker, monkeypatch)
