"""GET /metrics: Prometheus text format (parsed with the official client's parser), admin only."""

from __future__ import annotations

from prometheus_client.parser import text_string_to_metric_families

from workers.tasks import run_request_job


def _samples(client, auth) -> dict[tuple, float]:
    r = client.get("/metrics", headers=auth("admin"))
    assert r.status_code == 200, r.data[:500]
    assert r.content_type.startswith("text/plain")
    out = {}
    for family in text_string_to_metric_families(r.get_data(as_text=True)):
        for sample in family.samples:
            out[(sample.name, tuple(sorted(sample.labels.items())))] = sample.value
    return out


def test_job_counts_latency_and_budget_refusals(api, app, client, auth):
    first = api.submit().get_json()
    api.submit()
    assert run_request_job(first["id"], app.extensions["sizewise"]["config"]) == "computed"
    before = _samples(client, auth)
    # Job counts come from the database: one computed, one still queued.
    assert before[("sizewise_jobs", (("job", "request"), ("status", "computed")))] == 1
    assert before[("sizewise_jobs", (("job", "request"), ("status", "queued")))] == 1
    route = (("method", "POST"), ("route", "/v1/requests"), ("status", "202"))
    assert before[("sizewise_api_request_seconds_count", route)] >= 2
    after = _samples(client, auth)
    # The compute time of the job run above was observed (job request, on a worker).
    assert (
        after[("sizewise_job_compute_seconds_count", (("job", "request"), ("where", "worker")))]
        >= 1
    )


def test_metrics_need_an_admin_token(client, auth, anon_client):
    assert anon_client.get("/metrics").status_code == 401
    assert client.get("/metrics", headers=auth("statistician")).status_code == 403


def test_every_response_carries_a_request_id(client, anon_client):
    mine = client.get("/v1/catalogue", headers={"X-Request-Id": "ngh-cro.trace:42"})
    assert mine.headers["X-Request-Id"] == "ngh-cro.trace:42"  # a well-formed id is kept
    new = client.get("/v1/catalogue")
    assert len(new.headers["X-Request-Id"]) == 32
    bad = client.get("/v1/catalogue", headers={"X-Request-Id": "no spaces allowed"})
    assert bad.headers["X-Request-Id"] not in ("no spaces allowed", new.headers["X-Request-Id"])
    # Refusals carry one too.
    assert len(anon_client.get("/v1/catalogue").headers["X-Request-Id"]) == 32
