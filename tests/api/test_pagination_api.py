"""Cursor pagination: limit, an opaque cursor, an absolute next link, and a stable keyset order."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest
from sqlalchemy import update

from service.store.db import session_scope
from service.store.models import Request


def _walk(client, url: str, headers=None) -> list[dict]:
    pages = [client.get(url, headers=headers).get_json()]
    while pages[-1]["next"]:
        assert pages[-1]["next"].startswith("http://localhost/v1/")
        pages.append(client.get(pages[-1]["next"], headers=headers).get_json())
    return pages


def test_the_next_link_keeps_the_filters_and_the_limit(api):
    ids = [api.submit().get_json()["id"] for _ in range(3)]
    first = api.client.get("/v1/requests?protocol_id=NGH-2025-031&limit=1").get_json()
    assert first["limit"] == 1 and first["total"] == 3
    assert "protocol_id=NGH-2025-031" in first["next"] and "limit=1" in first["next"]
    pages = _walk(api.client, "/v1/requests?protocol_id=NGH-2025-031&limit=1")
    assert [p["items"][0]["id"] for p in pages] == ids[::-1]  # newest first
    assert pages[-1]["next"] is None


def test_rows_with_the_same_time_are_ordered_by_id_and_none_is_skipped(api):
    ids = [api.submit().get_json()["id"] for _ in range(5)]
    same = datetime(2025, 6, 1, 9, 0, tzinfo=UTC)
    with session_scope(api.sessions()) as session:
        session.execute(update(Request).values(submitted_at=same))
    pages = _walk(api.client, "/v1/requests?limit=2")
    seen = [item["id"] for p in pages for item in p["items"]]
    assert seen == sorted(ids, reverse=True)


def test_requests_submitted_while_paging_do_not_shift_the_pages(api):
    older = [api.submit().get_json()["id"] for _ in range(4)]
    first = api.client.get("/v1/requests?limit=2").get_json()
    newer = [api.submit().get_json()["id"] for _ in range(3)]
    rest = _walk(api.client, first["next"])
    seen = [i["id"] for i in first["items"]] + [i["id"] for p in rest for i in p["items"]]
    # An offset would show the two middle ones again; the cursor resumes after the last seen.
    assert seen == older[::-1]
    assert not set(newer) & set(seen)


@pytest.mark.parametrize(
    "query,message",
    [
        ("limit=500", "must be from 1 to 100; got 500"),
        ("limit=0", "must be from 1 to 100; got 0"),
        ("cursor=bm90LWEta2V5", "not a cursor this API issued"),
        ("cursor=%25%25%25", "not a cursor this API issued"),
    ],
)
def test_a_bad_limit_or_cursor_is_refused_naming_the_parameter(api, query, message):
    r = api.client.get(f"/v1/requests?{query}")
    assert r.status_code == 422
    field = "query." + query.split("=")[0]
    assert message in r.get_json()["errors"][field][0]


def test_reruns_explorations_and_deliveries_are_paginated(api):
    request_id = api.submit().get_json()["id"]
    api.compute_as_worker(request_id)
    auditor = api.tokens.headers("auditor")
    reruns = [
        api.client.post(f"/v1/requests/{request_id}/reruns", headers=auditor).get_json()["id"]
        for _ in range(3)
    ]
    pages = _walk(api.client, f"/v1/requests/{request_id}/reruns?limit=2")
    assert [len(p["items"]) for p in pages] == [2, 1]
    assert [i["id"] for p in pages for i in p["items"]] == reruns  # oldest first

    explorations = api.client.get(f"/v1/requests/{request_id}/explorations?limit=5").get_json()
    assert explorations == {"items": [], "limit": 5, "next": None}
    r = api.client.get(f"/v1/requests/{request_id}/explorations?limit=101")
    assert r.status_code == 422 and "query.limit" in r.get_json()["errors"]

    log = api.client.get(f"/v1/requests/{request_id}/deliveries").get_json()
    assert log == {"items": [], "limit": 20, "next": None}
    r = api.client.get(f"/v1/requests/{request_id}/reruns?verbose=1")
    assert r.status_code == 422 and "query.verbose" in r.get_json()["errors"]
