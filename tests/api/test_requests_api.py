"""POST/GET /v1/requests: stored then queued, idempotency, filters and pagination."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

from sqlalchemy import update

from service.store.db import session_scope
from service.store.models import Request


def test_submit_stores_then_queues(api, settings):
    response = api.submit(name="a.okafor")
    assert response.status_code == 202
    body = response.get_json()
    assert response.headers["Location"] == f"http://localhost/v1/requests/{body['id']}"
    assert body["status"] == "queued" and body["published_at"] is not None
    # The normalized question keeps what was entered and fills the defaults (VOCAB §3).
    assert body["question"]["effect"] == {"difference": 0.5}
    assert body["question"]["assumptions"] == {"sd": 1.0}
    assert body["question"]["analysis"] == "pooled_t"
    assert body["question_submitted"] == api.question_body()
    assert (body["outcome"], body["layout"]) == ("continuous", "two_groups")
    assert body["result"] is None and body["seed"] is None
    assert [e["action"] for e in body["history"]] == ["submitted", "published"]
    assert body["history"][0]["actor"] == "a.okafor (intake)"
    assert body["submitted_by"] == api.tokens.token_id("intake", "a.okafor")
    # The filesystem broker holds exactly one message for it.
    queue_dir = Path(settings["BROKER_URL"].removeprefix("filesystem://")) / "queue"
    assert len(list(queue_dir.iterdir())) == 1


def test_simulation_request_gets_a_stored_seed(api):
    question = api.question_body(
        find="power",
        sample_size={"per_group": [30, 30]},
        method="simulation",
        simulation={"replicates": 1000},
    )
    body = api.submit(api.request_body(question)).get_json()
    seed = body["question"]["simulation"]["seed"]
    assert isinstance(seed, int) and 0 <= seed < 2**53 and body["seed"] == seed
    again = api.client.get(f"/v1/requests/{body['id']}").get_json()
    assert again["question"]["simulation"]["seed"] == seed


def test_posted_seed_is_kept(api):
    question = api.question_body(
        find="power",
        sample_size={"per_group": [30, 30]},
        method="simulation",
        simulation={"replicates": 1000, "seed": 20250611},
    )
    assert api.submit(api.request_body(question)).get_json()["seed"] == 20250611


def test_idempotency_key_same_body_returns_the_same_request(api):
    first = api.submit(key="ngh-031-v1")
    second = api.submit(key="ngh-031-v1")
    assert (first.status_code, second.status_code) == (202, 200)
    assert second.get_json()["id"] == first.get_json()["id"]
    assert second.headers["Location"] == first.headers["Location"]
    assert api.client.get("/v1/requests").get_json()["total"] == 1


def test_idempotency_key_with_a_different_body_is_refused(api):
    api.submit(key="ngh-031-v1")
    response = api.submit(api.request_body(notes="changed"), key="ngh-031-v1")
    assert response.status_code == 422
    problem = response.get_json()
    assert problem["errors"] == {"headers.Idempotency-Key": ["already used with a different body"]}
    assert "ngh-031-v1" in problem["detail"]


def _submit_variants(api) -> dict[str, str]:
    ids = {}
    ids["a"] = api.submit().get_json()["id"]
    other = api.request_body(
        {"outcome": "association", "layout": "single_group", "effect": {"r": 0.3}},
        protocol={"id": "NGH-2025-044", "title": "Grip strength and frailty"},
        requester={
            "name": "Dr. Lin Park",
            "email": "l.park@northbridge-general.example",
            "department": "Geriatrics",
        },
    )
    ids["b"] = api.submit(other).get_json()["id"]
    ids["c"] = api.submit().get_json()["id"]
    return ids


def test_list_filters(api):
    ids = _submit_variants(api)

    def listed(query: str) -> set[str]:
        response = api.client.get(f"/v1/requests?{query}")
        assert response.status_code == 200, response.get_json()
        return {item["id"] for item in response.get_json()["items"]}

    assert listed("protocol_id=NGH-2025-044") == {ids["b"]}
    assert listed("outcome=association") == {ids["b"]}
    assert listed("layout=two_groups") == {ids["a"], ids["c"]}
    assert listed("outcome=continuous&layout=two_groups") == {ids["a"], ids["c"]}
    assert listed("outcome=association&layout=two_groups") == set()
    assert listed("requester=A.Okafor@northbridge-general.example") == {ids["a"], ids["c"]}
    assert listed("status=queued") == set(ids.values())
    assert listed("status=computed") == set()
    today = datetime.now(UTC).date()
    assert listed(f"submitted_from={today}&submitted_to={today}") == set(ids.values())
    assert listed(f"submitted_to={today - timedelta(days=1)}") == set()


def test_list_dates_use_the_stored_time(api):
    ids = _submit_variants(api)
    with session_scope(api.sessions()) as session:
        session.execute(
            update(Request)
            .where(Request.id == ids["b"])
            .values(submitted_at=datetime(2025, 3, 1, 23, 30, tzinfo=UTC))
        )
    body = api.client.get("/v1/requests?submitted_from=2025-03-01&submitted_to=2025-03-01")
    assert [i["id"] for i in body.get_json()["items"]] == [ids["b"]]


def test_pagination(api):
    ids = [api.submit().get_json()["id"] for _ in range(5)]
    pages = [api.client.get("/v1/requests?limit=2").get_json()]
    while pages[-1]["next"]:
        pages.append(api.client.get(pages[-1]["next"]).get_json())
    assert [len(p["items"]) for p in pages] == [2, 2, 1]
    assert all((p["total"], p["limit"]) == (5, 2) for p in pages)
    seen = [item["id"] for p in pages for item in p["items"]]
    assert sorted(seen) == sorted(ids) and len(set(seen)) == 5
    assert "history" not in pages[0]["items"][0]


def test_detail_of_a_missing_request_is_404(api):
    response = api.client.get(f"/v1/requests/{'0' * 32}")
    assert response.status_code == 404
    assert response.mimetype == "application/problem+json"
    assert "0" * 32 in response.get_json()["detail"]
