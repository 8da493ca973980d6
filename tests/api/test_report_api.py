"""The report routes: HTML page, power curve as SVG and PNG, the staff list, signed report links."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from datetime import UTC, datetime, timedelta

from service.api.auth import link_key, sign_link
from service.engine import compute
from service.schemas.question import load_question
from service.store import jobs
from service.store.db import session_scope
from service.store.models import Request


def _computed(api) -> str:
    """Submit a request and store its engine record as a worker would."""
    request_id = api.submit(api.request_body()).get_json()["id"]
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
    record = compute(load_question(api.question_body()))
    assert record["reproducibility"]["record_sha256"] in page


def test_curve_svg_and_png(client, api):
    request_id = _computed(api)
    svg = client.get(f"/v1/requests/{request_id}/curve.svg")
    assert svg.status_code == 200 and svg.mimetype == "image/svg+xml"
    root = ET.fromstring(svg.get_data(as_text=True))
    gids = {el.get("id") for el in root.iter()}
    assert {"target-line", "chosen-n"} <= gids
    # the standalone drawing says what it shows and under which assumptions
    drawn = " ".join(" ".join(root.itertext()).split())
    assert "with the chosen size marked" in drawn and "Continuous outcome, two groups" in drawn
    png = client.get(f"/v1/requests/{request_id}/curve.png")
    assert png.status_code == 200 and png.data[:8] == b"\x89PNG\r\n\x1a\n"


def test_report_before_a_result_is_a_conflict(client, api):
    request_id = api.submit(api.request_body()).get_json()["id"]
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
    assert "Continuous outcome, two groups" in page and "two_groups" not in page
    assert client.get("/v1/staff/requests?status=bogus").status_code == 422


# --- signed report links ----------------------------------------------------------------------


def _link(api, request_id: str, role: str = "statistician") -> str:
    r = api.post(f"/v1/requests/{request_id}/report-links", role=role)
    assert r.status_code == 201, r.get_json()
    return r.get_json()["url"]


def test_a_report_link_opens_the_pages_without_a_token(anon_client, api):
    request_id = _computed(api)
    r = api.post(f"/v1/requests/{request_id}/report-links", role="auditor")
    body = r.get_json()
    assert body["url"].startswith(f"http://localhost/v1/requests/{request_id}/report?link=")
    expires = datetime.fromisoformat(body["expires_at"])
    # valid 24 hours (common practice for shared links, no source)
    assert timedelta(hours=23, minutes=59) < expires - datetime.now(UTC) <= timedelta(hours=24)
    page = anon_client.get(body["url"])
    assert page.status_code == 200 and page.mimetype == "text/html"
    token = body["url"].split("link=", 1)[1]
    assert anon_client.get(f"/v1/requests/{request_id}/curve.svg?link={token}").status_code == 200
    png = anon_client.get(f"/v1/requests/{request_id}/curve.png?link={token}")
    assert png.status_code == 200 and png.data[:4] == b"\x89PNG"


def test_a_report_link_opens_nothing_else(anon_client, api):
    request_id = _computed(api)
    token = _link(api, request_id).split("link=", 1)[1]
    for path in (
        f"/v1/requests/{request_id}",
        f"/v1/requests/{request_id}/explorations",
        "/v1/requests",
    ):
        r = anon_client.get(f"{path}?link={token}")
        assert r.status_code == 401 and r.mimetype == "application/problem+json", path
    r = anon_client.get(f"/v1/requests/{request_id}/report?link={token}&x=1")
    assert r.status_code == 422 and "query.x" in r.get_json()["errors"]


def test_expired_tampered_and_foreign_links_are_refused(app, anon_client, api):
    request_id = _computed(api)
    other_id = _computed(api)
    key = app.extensions["sizewise"]["link_key"]
    expired = sign_link(key, request_id, datetime.now(UTC) - timedelta(seconds=5))
    good = _link(api, request_id).split("link=", 1)[1]
    rid, expiry, signature = good.split(".")
    later = f"{rid}.{int(expiry) + 86400}.{signature}"  # pushed expiry, old signature
    flipped = f"{rid}.{expiry}.{signature[:-1]}{'0' if signature[-1] != '0' else '1'}"
    cases = [
        (request_id, expired, 401, "expired"),
        (request_id, later, 401, "altered"),
        (request_id, flipped, 401, "altered"),
        (request_id, "not-a-link", 401, "malformed"),
        (other_id, good, 403, request_id),
    ]
    for target, token, status, words in cases:
        r = anon_client.get(f"/v1/requests/{target}/report?link={token}")
        assert r.status_code == status and r.mimetype == "application/problem+json", (
            token,
            r.status_code,
        )
        body = r.get_json()
        assert words in body["detail"], body["detail"]
        assert list(body["errors"]) == ["query.link"]


def test_intake_gets_links_only_for_its_own_requests(api):
    request_id = _computed(api)  # submitted by intake a.okafor
    assert (
        api.post(
            f"/v1/requests/{request_id}/report-links", role="intake", name="a.okafor"
        ).status_code
        == 201
    )
    r = api.post(f"/v1/requests/{request_id}/report-links", role="intake", name="someone else")
    assert r.status_code == 404
    assert api.post("/v1/requests/" + "0" * 32 + "/report-links").status_code == 404


def test_the_link_key_comes_from_the_setting_or_one_shared_file(tmp_path, monkeypatch):
    assert link_key({"SECRET_KEY": "northbridge-demo-key"}) == b"northbridge-demo-key"
    monkeypatch.setenv("SIZEWISE_VAR_DIR", str(tmp_path))
    first, second = link_key({"SECRET_KEY": ""}), link_key({})
    # Every process reading the folder signs with the same key, kept private to the owner.
    assert first == second and len(first) == 64
    assert (tmp_path / "secret_key").stat().st_mode & 0o777 == 0o600
