"""Absolute links (request links, report links, Location) and the ETag of GET /v1/requests/{id}."""

from __future__ import annotations

import hashlib

import pytest

PUBLIC = "https://sizewise.northbridge-general.example/api"


def test_links_follow_the_host_the_caller_used(api):
    r = api.client.post(
        "/v1/requests",
        json=api.request_body(),
        headers={**api.tokens.headers("intake", "a.okafor"), "Host": "sizewise.internal:8443"},
    )
    assert r.status_code == 202
    request_id = r.get_json()["id"]
    base = "http://sizewise.internal:8443"
    assert r.headers["Location"] == f"{base}/v1/requests/{request_id}"
    assert r.get_json()["links"] == {
        "self": f"{base}/v1/requests/{request_id}",
        "report": f"{base}/v1/requests/{request_id}/report",
        "reruns": f"{base}/v1/requests/{request_id}/reruns",
        "explorations": f"{base}/v1/requests/{request_id}/explorations",
        "deliveries": f"{base}/v1/requests/{request_id}/deliveries",
    }


def test_the_configured_public_url_wins_over_the_host(app, api):
    app.extensions["sizewise"]["config"]["PUBLIC_URL"] = PUBLIC + "/"
    r = api.submit()
    request_id = r.get_json()["id"]
    assert r.headers["Location"] == f"{PUBLIC}/v1/requests/{request_id}"
    assert r.get_json()["links"]["report"] == f"{PUBLIC}/v1/requests/{request_id}/report"
    link = api.post(f"/v1/requests/{request_id}/report-links").get_json()["url"]
    assert link.startswith(f"{PUBLIC}/v1/requests/{request_id}/report?link=")
    listed = api.client.get("/v1/requests").get_json()["items"][0]
    assert listed["links"]["self"] == f"{PUBLIC}/v1/requests/{request_id}"


def test_a_request_carries_a_strong_etag_and_answers_304_while_unchanged(api):
    request_id = api.submit().get_json()["id"]
    first = api.client.get(f"/v1/requests/{request_id}")
    assert first.status_code == 200
    etag = first.headers["ETag"]
    assert not etag.startswith("W/")  # strong: byte-for-byte the same body
    assert etag == f'"{hashlib.sha256(first.get_data()).hexdigest()}"'
    assert first.headers["Cache-Control"] == "private, no-cache"

    again = api.client.get(f"/v1/requests/{request_id}", headers={"If-None-Match": etag})
    assert again.status_code == 304 and again.get_data() == b""
    assert again.headers["ETag"] == etag
    other = api.client.get(f"/v1/requests/{request_id}", headers={"If-None-Match": '"nope"'})
    assert other.status_code == 200

    # A comment changes the history, so the body and its tag change.
    assert api.post(f"/v1/requests/{request_id}/comments", {"text": "SD source?"}).status_code
    changed = api.client.get(f"/v1/requests/{request_id}", headers={"If-None-Match": etag})
    assert changed.status_code == 200 and changed.headers["ETag"] != etag


@pytest.mark.parametrize("header", ["*", 'W/"{etag}"', '"other", "{etag}"'])
def test_if_none_match_forms(api, header):
    request_id = api.submit().get_json()["id"]
    etag = api.client.get(f"/v1/requests/{request_id}").headers["ETag"].strip('"')
    r = api.client.get(
        f"/v1/requests/{request_id}", headers={"If-None-Match": header.format(etag=etag)}
    )
    # RFC 9110: If-None-Match compares weakly, and * matches any current representation.
    assert r.status_code == 304
