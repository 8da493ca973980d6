"""Notifications: registering a callback, the outbox rows status changes write, and delivery.

Delivery goes to a real HTTP receiver on the loopback (tests/webhook_receiver.py) that checks
every signature with its own implementation of the Standard Webhooks convention.
"""

from __future__ import annotations

import base64

import pytest
from sqlalchemy import select, update

from service.store import webhooks as hook_store
from service.store.db import session_scope
from service.store.models import WebhookMessage
from tests.webhook_receiver import Receiver
from workers.webhook_tasks import deliver_due, send

HOOK_URL = "https://forms.northbridge-general.example/sizewise/notify"
INTAKE = ("intake", "a.okafor")


@pytest.fixture
def settings(settings):
    # The receiver of these tests is a plain-http server on the loopback, as in a local run;
    # a zero backoff makes a retry due at once, so no test waits on a clock.
    return {**settings, "WEBHOOK_ALLOW_HTTP": True, "WEBHOOK_BACKOFF_SECONDS": 0.0}


def _put(api, url: str, who=INTAKE):
    return api.client.put("/v1/webhook", json={"url": url}, headers=api.tokens.headers(*who))


def _messages(api, request_id: str) -> list[WebhookMessage]:
    with session_scope(api.sessions()) as s:
        rows = s.scalars(
            select(WebhookMessage)
            .where(WebhookMessage.request_id == request_id)
            .order_by(WebhookMessage.created_at)
        ).all()
        s.expunge_all()
    return list(rows)


def test_a_callback_is_registered_shown_without_its_secret_replaced_and_removed(api):
    r = _put(api, HOOK_URL)
    assert r.status_code == 201, r.get_json()
    created = r.get_json()
    assert created["url"] == HOOK_URL and created["secret"].startswith("whsec_")
    assert len(base64.b64decode(created["secret"][len("whsec_") :])) == 32
    assert "request.computed" in created["events"]
    shown = api.client.get("/v1/webhook", headers=api.tokens.headers(*INTAKE)).get_json()
    assert shown["id"] == created["id"] and "secret" not in shown
    again = _put(api, HOOK_URL + "/v2")
    assert again.status_code == 200
    assert again.get_json()["secret"] != created["secret"]  # every PUT rotates the secret
    assert again.get_json()["id"] == created["id"]
    # Another token has its own callback (or none).
    other = api.client.get("/v1/webhook", headers=api.tokens.headers("intake", "b.lund"))
    assert other.status_code == 404
    gone = api.client.delete("/v1/webhook", headers=api.tokens.headers(*INTAKE))
    assert gone.status_code == 204
    assert api.client.get("/v1/webhook", headers=api.tokens.headers(*INTAKE)).status_code == 404


@pytest.mark.parametrize(
    "url,needle",
    [
        ("ftp://forms.northbridge-general.example/x", "must start with"),
        ("https://user:pw@forms.northbridge-general.example/x", "user name or password"),
        ("https:///no-host", "must name a host"),
        ("https://forms.northbridge-general.example/x#frag", "fragment"),
        ("https://forms.northbridge-general.example:99999/x", "absolute URL"),
        ("https://" + "a" * 2000 + ".example/", "at most 2000"),
    ],
)
def test_an_unusable_url_is_refused_naming_the_field(api, url, needle):
    r = _put(api, url)
    assert r.status_code == 422, r.get_json()
    assert needle in r.get_json()["errors"]["url"][0]


def test_outside_a_local_run_only_https_to_another_host_is_accepted(app, api):
    app.extensions["sizewise"]["config"]["WEBHOOK_ALLOW_HTTP"] = False
    r = _put(api, "http://forms.northbridge-general.example/notify")
    assert r.status_code == 422
    assert r.get_json()["errors"]["url"] == ["must start with https://; got 'http'"]
    r = _put(api, "https://127.0.0.1:8443/notify")
    assert "loopback" in r.get_json()["errors"]["url"][0]
    assert _put(api, HOOK_URL).status_code == 201


def test_each_notified_status_change_writes_one_outbox_row_in_its_transaction(api):
    assert _put(api, HOOK_URL).status_code == 201
    request_id = api.submit(role=INTAKE[0], name=INTAKE[1]).get_json()["id"]
    assert _messages(api, request_id) == []  # submitted and queued: nothing to tell
    api.compute_as_worker(request_id)
    r = api.post(f"/v1/requests/{request_id}/approve", {"note": "Assumptions checked."})
    assert r.status_code == 200, r.get_json()
    messages = _messages(api, request_id)
    assert [m.event_type for m in messages] == ["request.computed", "request.approved"]
    assert all(m.status == "pending" and m.id.startswith("msg_") for m in messages)
    # Each row names the audit event that made it: the same change cannot notify twice.
    assert len({m.audit_event_id for m in messages}) == 2


def test_requests_of_a_token_without_a_callback_write_no_outbox_rows(api):
    request_id = api.submit(role=INTAKE[0], name=INTAKE[1]).get_json()["id"]
    api.compute_as_worker(request_id)
    assert _messages(api, request_id) == []


def test_a_signed_delivery_is_retried_after_a_500_and_logged(app, api):
    config = app.extensions["sizewise"]["config"]
    with Receiver(codes=[500]) as receiver:
        receiver.secret = _put(api, receiver.url).get_json()["secret"]
        request_id = api.submit(role=INTAKE[0], name=INTAKE[1]).get_json()["id"]
        api.compute_as_worker(request_id)
        assert deliver_due(config) == 1  # answered 500: due again (zero backoff here)
        assert deliver_due(config) == 1  # answered 204
        assert deliver_due(config) == 0  # nothing left
    first, second = receiver.received
    assert first["verified"] and second["verified"]
    assert (first["code"], second["code"]) == (500, 204)
    # The message id is stable across attempts: that is what the receiver dedupes on.
    assert first["id"] == second["id"] and first["id"].startswith("msg_")
    assert list(receiver.effects) == [first["id"]]
    payload = receiver.effects[first["id"]]
    assert payload["type"] == "request.computed"
    assert payload["data"]["id"] == request_id and payload["data"]["status"] == "computed"
    assert payload["data"]["url"] == f"http://localhost/v1/requests/{request_id}"

    log = api.client.get(
        f"/v1/requests/{request_id}/deliveries", headers=api.tokens.headers(*INTAKE)
    )
    assert log.status_code == 200, log.get_json()
    (delivery,) = log.get_json()["items"]
    assert delivery["id"] == first["id"] and delivery["status"] == "delivered"
    assert [a["status_code"] for a in delivery["attempts"]] == [500, 204]
    assert [a["attempt"] for a in delivery["attempts"]] == [1, 2]
    assert delivery["attempts"][0]["error"].startswith("HTTP 500")
    assert delivery["attempts"][1]["error"] is None and delivery["finished_at"]


def test_a_message_delivered_twice_has_one_effect(app, api):
    """A worker that dies after the POST but before recording it sends the message again."""
    config = app.extensions["sizewise"]["config"]
    with Receiver() as receiver:
        receiver.secret = _put(api, receiver.url).get_json()["secret"]
        request_id = api.submit(role=INTAKE[0], name=INTAKE[1]).get_json()["id"]
        api.compute_as_worker(request_id)
        (message,) = _messages(api, request_id)
        with session_scope(api.sessions()) as s:
            delivery = hook_store.claim(s, message.id, "courier-that-dies", message.next_attempt_at)
        assert send(delivery, 5.0).status_code == 204  # sent; the worker dies before recording
        with session_scope(api.sessions()) as s:
            # The claim's hold ran out (CLAIM_SECONDS): the message is due again.
            s.execute(
                update(WebhookMessage)
                .where(WebhookMessage.id == message.id)
                .values(next_attempt_at=message.next_attempt_at)
            )
        assert deliver_due(config) == 1
    assert [r["id"] for r in receiver.received] == [message.id, message.id]
    assert all(r["verified"] and r["code"] == 204 for r in receiver.received)
    assert list(receiver.effects) == [message.id]  # applied once
    (delivery_log,) = api.client.get(
        f"/v1/requests/{request_id}/deliveries", headers=api.tokens.headers(*INTAKE)
    ).get_json()["items"]
    assert delivery_log["status"] == "delivered" and delivery_log["attempts"][-1]["attempt"] == 2


def test_attempts_are_bounded_and_a_removed_callback_drops_what_waits(app, api):
    config = {**app.extensions["sizewise"]["config"], "WEBHOOK_ATTEMPTS": 2}
    with Receiver(codes=[500, 503, 500]) as receiver:
        receiver.secret = _put(api, receiver.url).get_json()["secret"]
        request_id = api.submit(role=INTAKE[0], name=INTAKE[1]).get_json()["id"]
        api.compute_as_worker(request_id)
        assert deliver_due(config) == 1 and deliver_due(config) == 1
        assert deliver_due(config) == 0
        (message,) = _messages(api, request_id)
        assert message.status == "failed" and message.attempts == 2
        r = api.post(f"/v1/requests/{request_id}/return", {"note": "Use the pilot's SD."})
        assert r.status_code == 200
        assert api.client.delete("/v1/webhook", headers=api.tokens.headers(*INTAKE)).status_code
        assert deliver_due(config) == 0
    statuses = [m.status for m in _messages(api, request_id)]
    assert statuses == ["failed", "dropped"]
    assert len(receiver.received) == 2


def test_backoff_grows_fourfold_and_is_capped():
    assert [hook_store.backoff(n, 10).total_seconds() for n in (1, 2, 3)] == [10, 40, 160]
    assert hook_store.backoff(20, 10).total_seconds() == 12 * 3600


def test_an_unreachable_receiver_is_a_failed_attempt_in_words(app, api):
    config = app.extensions["sizewise"]["config"]
    with Receiver() as receiver:
        url = receiver.url
    # The server is closed: nothing listens on that port any more.
    assert _put(api, url).status_code == 201
    request_id = api.submit(role=INTAKE[0], name=INTAKE[1]).get_json()["id"]
    api.compute_as_worker(request_id)
    assert deliver_due(config) == 1
    (delivery,) = api.client.get(
        f"/v1/requests/{request_id}/deliveries", headers=api.tokens.headers(*INTAKE)
    ).get_json()["items"]
    attempt = delivery["attempts"][0]
    assert attempt["status_code"] is None and attempt["error"].startswith("no answer:")
    assert delivery["status"] == "pending" and delivery["next_attempt_at"]


def test_another_intake_token_cannot_read_the_delivery_log(api):
    request_id = api.submit(role=INTAKE[0], name=INTAKE[1]).get_json()["id"]
    other = api.client.get(
        f"/v1/requests/{request_id}/deliveries", headers=api.tokens.headers("intake", "b.lund")
    )
    assert other.status_code == 404  # its existence is not revealed
    auditor = api.client.get(
        f"/v1/requests/{request_id}/deliveries", headers=api.tokens.headers("auditor")
    )
    assert auditor.status_code == 200 and auditor.get_json()["items"] == []
