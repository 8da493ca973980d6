"""The report routes: HTML page, power curve as SVG and PNG, the staff list; refused before a result."""

from __future__ import annotations

import xml.etree.ElementTree as ET

from service.engine import compute
from service.schemas.question import load_question
from service.store import jobs
from service.store.db import session_scope
from service.store.models import Request

QUESTION = {"design": "two_means", "find": "sample_size", "effect": {"difference": 0.5, "sd": 1.0}}


def _computed(api) -> str:
    """Submit a request and store its engine record as a worker would."""
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    with session_scope(api.sessions()) as s:
        question = s.get(Request, request_id).question
        assert jobs.claim(s, "request", request_id, "worker-test", 60, 3)
    record = compute(question)
    with session_scope(api.sessions()) as s:
        assert jobs.finish_request(s, request_id, "worker-test", record) == "stored"
    return request_id


def test_report_page_tells_the_whole_story(client, api):
    request_id = _computed(api)
    r = client.get(f"/v1/requests/{request_id}/report")
    assert r.status_code == 200 and r.mimetype == "text/html"
    page = r.get_data(as_text=True)
    # published 64 per group: Cohen 1988, Table 2.4.1 (d = 0.5, two-sided .05, power .80)
    assert "64" in page and "128" in page
    assert "<svg" in page and "statistician" in page.lower()
    record = compute(load_question(QUESTION))
    assert record["reproducibility"]["record_sha256"] in page


def test_curve_svg_and_png(client, api):
    request_id = _computed(api)
    svg = client.get(f"/v1/requests/{request_id}/curve.svg")
    assert svg.status_code == 200 and svg.mimetype == "image/svg+xml"
    root = ET.fromstring(svg.get_data(as_text=True))
    gids = {el.get("id") for el in root.iter()}
    assert {"target-line", "chosen-n"} <= gids
    png = client.get(f"/v1/requests/{request_id}/curve.png")
    assert png.status_code == 200 and png.data[:8] == b"\x89PNG\r\n\x1a\n"


def test_report_before_a_result_is_a_conflict(client, api):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    r = client.get(f"/v1/requests/{request_id}/report")
    assert r.status_code == 409 and r.mimetype == "application/problem+json"
    assert "no result yet" in r.get_json()["detail"]
    assert client.get("/v1/requests/" + "0" * 32 + "/curve.svg").status_code == 404


def test_staff_list_shows_status(client, api):
    request_id = _computed(api)
    r = client.get("/v1/staff/requests")
    assert r.status_code == 200 and r.mimetype == "text/html"
    page = r.get_data(as_text=True)
    assert request_id in page and "computed" in page
    assert client.get("/v1/staff/requests?status=bogus").status_code == 422
