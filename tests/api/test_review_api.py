"""Cancel, assign, comment, approve/return and reruns: legal transitions only."""

from __future__ import annotations

import pytest

from service.engine import compute
from service.store import jobs
from service.store.audit import verify_chain
from service.store.db import session_scope
from service.store.models import Request


def _claim(api, request_id: str, owner: str = "worker-test") -> None:
    with session_scope(api.sessions()) as s:
        assert jobs.claim(s, "request", request_id, owner, 60, 3)


def _computed(api) -> str:
    """Submit, then claim and store a real engine record as a worker would."""
    request_id = api.submit().get_json()["id"]
    _claim(api, request_id)
    with session_scope(api.sessions()) as s:
        record = compute(s.get(Request, request_id).question)
        assert jobs.finish_request(s, request_id, "worker-test", record)
    return request_id


def test_computed_request_shows_the_engine_record_unchanged(api):
    request_id = _computed(api)
    body = api.client.get(f"/v1/requests/{request_id}").get_json()
    assert body["status"] == "computed" and body["progress"] == 1.0
    # Cohen (1988), Table 2.4.1: d = 0.5, two-sided alpha .05, power .80 -> 64 per group.
    assert body["result"]["sample_size"]["per_group"] == [64, 64]
    assert body["result"] == compute(body["question"])


def test_approve_from_computed_with_a_note(api):
    request_id = _computed(api)
    r = api.post(f"/v1/requests/{request_id}/approve", {"note": "Assumptions checked."})
    assert r.status_code == 200 and r.get_json()["status"] == "approved"
    assert r.get_json()["history"][-1]["detail"] == {
        "note": "Assumptions checked.",
        "status": "approved",
    }
    # Once approved it cannot be returned or approved again.
    again = api.post(f"/v1/requests/{request_id}/return", {"note": "Second thoughts."})
    assert again.status_code == 409
    assert again.get_json()["current_status"] == "approved"


def test_return_from_computed(api):
    request_id = _computed(api)
    r = api.post(f"/v1/requests/{request_id}/return", {"note": "SD looks too small."})
    assert r.status_code == 200 and r.get_json()["status"] == "returned"


@pytest.mark.parametrize("decision", ["approve", "return"])
def test_review_refused_before_a_result(api, decision):
    request_id = api.submit().get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/{decision}", {"note": "Looks fine."})
    assert r.status_code == 409
    problem = r.get_json()
    assert problem["current_status"] == "queued" and "'queued'" in problem["detail"]
    assert r.mimetype == "application/problem+json"


def test_approving_a_failed_request_is_refused(api):
    request_id = api.submit().get_json()["id"]
    _claim(api, request_id)
    with session_scope(api.sessions()) as s:
        assert jobs.fail(s, "request", request_id, "worker-test", "engine error")
    r = api.post(f"/v1/requests/{request_id}/approve", {"note": "ok"})
    assert r.status_code == 409 and r.get_json()["current_status"] == "failed"


def test_review_needs_a_note(api):
    request_id = _computed(api)
    r = api.post(f"/v1/requests/{request_id}/approve", {})
    assert r.status_code == 422
    assert r.get_json()["errors"] == {"note": ["Missing data for required field."]}


def test_assign_and_comment_are_in_the_history(api):
    request_id = api.submit().get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/assign", {"to": "j.moreau"}, name="lead")
    assert r.status_code == 200 and r.get_json()["assigned_to"] == "j.moreau"
    c = api.post(f"/v1/requests/{request_id}/comments", {"text": "Which SD source?"})
    assert c.status_code == 201 and c.get_json()["detail"] == {"text": "Which SD source?"}
    history = api.client.get(f"/v1/requests/{request_id}").get_json()["history"]
    assert [(e["actor"], e["action"]) for e in history][-2:] == [
        ("lead (statistician)", "assigned"),
        ("j.moreau (statistician)", "comment"),
    ]
    with session_scope(api.sessions()) as s:
        assert verify_chain(s) == []


def test_cancel_queued_is_immediate(api):
    request_id = api.submit().get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/cancel")
    assert r.status_code == 200 and r.get_json()["status"] == "cancelled"
    # Ended: a second cancel, an assignment and a claim are all refused.
    assert api.post(f"/v1/requests/{request_id}/cancel").status_code == 409
    assert api.post(f"/v1/requests/{request_id}/assign", {"to": "x"}).status_code == 409
    with session_scope(api.sessions()) as s:
        assert jobs.claim(s, "request", request_id, "late-worker", 60, 3) is False


def test_cancel_running_asks_the_worker_to_stop(api):
    request_id = api.submit().get_json()["id"]
    _claim(api, request_id)
    r = api.post(f"/v1/requests/{request_id}/cancel", {"reason": "Protocol withdrawn."})
    body = r.get_json()
    assert r.status_code == 200 and (body["status"], body["cancel_requested"]) == ("running", True)
    with session_scope(api.sessions()) as s:
        assert jobs.cancel_requested(s, "request", request_id)
        assert jobs.cancel(s, "request", request_id, "worker-test")
    assert api.client.get(f"/v1/requests/{request_id}").get_json()["status"] == "cancelled"


def test_cancel_computed_is_refused(api):
    request_id = _computed(api)
    r = api.post(f"/v1/requests/{request_id}/cancel")
    assert r.status_code == 409 and r.get_json()["current_status"] == "computed"


def test_rerun_needs_a_result(api):
    request_id = api.submit().get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/reruns", role="auditor")
    assert r.status_code == 409 and "no stored result" in r.get_json()["detail"]


def test_rerun_is_queued_and_listed(api):
    request_id = _computed(api)
    r = api.post(f"/v1/requests/{request_id}/reruns", {"note": "Annual check."}, role="auditor")
    assert r.status_code == 202
    rerun = r.get_json()
    assert rerun["status"] == "queued" and rerun["published_at"] is not None
    assert (
        r.headers["Location"] == f"http://localhost/v1/requests/{request_id}/reruns/{rerun['id']}"
    )
    assert rerun["env_original"]["numpy"]
    listed = api.client.get(f"/v1/requests/{request_id}/reruns").get_json()
    assert [i["id"] for i in listed["items"]] == [rerun["id"]]
    one = api.client.get(r.headers["Location"])
    assert one.status_code == 200 and one.get_json()["request_id"] == request_id
    summary = api.client.get(f"/v1/requests/{request_id}").get_json()["reruns"]
    assert summary["total"] == 1 and summary["latest"]["id"] == rerun["id"]
    missing = api.client.get(f"/v1/requests/{request_id}/reruns/{'f' * 32}")
    assert missing.status_code == 404
