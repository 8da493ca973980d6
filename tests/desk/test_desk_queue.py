"""The queue page: columns, filters, counts per status, overdue marks, sort and pagination."""

from __future__ import annotations

import re

from service.store import requests as store
from service.store.db import session_scope
from tests.conftest import request_body


def _ids(html: str) -> list[str]:
    return re.findall(r'data-request="([0-9a-f]{32})"', html)


def _counts(html: str) -> str:
    return re.search(r'id="status-counts">(.*?)</p>', html, re.S).group(1)


def _submit(desk_api, *, title: str, deadline: str | None, name: str = "a.okafor", **extra):
    body = request_body(deadline=deadline, **extra)
    body["protocol"] = dict(body["protocol"], title=title)
    if deadline is None:
        body.pop("deadline")
    response = desk_api.submit(body, name=name)
    assert response.status_code == 202, response.get_json()
    return response.get_json()["id"]


def test_the_queue_shows_each_request_with_its_columns(desk, desk_api):
    request_id = _submit(
        desk_api, title="Early mobilisation after hip fracture surgery", deadline="2025-09-30"
    )
    html = desk("statistician", "j.moreau").get("/desk/requests").get_data(as_text=True)
    row = re.search(rf'<tr[^>]*data-request="{request_id}".*?</tr>', html, re.S).group(0)
    for text in (
        "Early mobilisation after hip fracture surgery",
        "NGH-2025-031",
        "Dr. Amara Okafor",
        "Orthopaedics",
        "Continuous outcome, two groups",
        "Computed, awaiting review",
        "unassigned",
        "2025-09-30",
    ):
        assert text in row, text
    # Needed by a date long past and still awaiting review: overdue, and marked so.
    assert 'class="overdue"' in row and "badge-overdue" in row
    assert "Computed, awaiting review: <strong>1</strong>" in _counts(html)


def test_filters_by_status_assignee_me_overdue_and_design(desk, desk_api):
    late = _submit(desk_api, title="Late", deadline="2025-01-15")
    future = _submit(desk_api, title="Future", deadline="2099-01-01")
    mine = _submit(desk_api, title="Mine", deadline="2099-02-01")
    assert desk_api.post(f"/v1/requests/{mine}/assign", {"to": "j.moreau"}).status_code == 200
    assert desk_api.post(f"/v1/requests/{future}/assign", {"to": "r.patel"}).status_code == 200
    assert desk_api.post(f"/v1/requests/{future}/approve", {"note": "fine"}).status_code == 200
    d = desk("statistician", "j.moreau")

    def shown(query: str) -> set[str]:
        r = d.get(f"/desk/requests?{query}")
        assert r.status_code == 200
        return set(_ids(r.get_data(as_text=True)))

    assert shown("") == {late, future, mine}
    assert shown("status=approved") == {future}
    assert shown("status=computed") == {late, mine}
    assert shown("assignee=r.patel") == {future}
    assert shown("assignee=-") == {late}
    assert shown("mine=1") == {mine}
    assert shown("overdue=1") == {late}
    assert shown("cell=continuous/two_groups") == {late, future, mine}
    assert shown("cell=binary/two_groups") == set()
    # Counts per status follow the other filters, so each count is what its link shows.
    counts = _counts(d.get("/desk/requests?assignee=r.patel").get_data(as_text=True))
    assert "Approved: <strong>1</strong>" in counts and "Computed" not in counts


def test_unusable_filter_values_are_named_and_ignored(desk, desk_api):
    _submit(desk_api, title="One", deadline="2099-01-01")
    r = desk("statistician").get("/desk/requests?status=lost&cell=nowhere&page=x")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert "status must be one of received" in html and "unknown design" in html
    assert len(_ids(html)) == 1


def test_sorted_by_needed_by_date_soonest_first_undated_last(desk, desk_api):
    b = _submit(desk_api, title="B", deadline="2099-03-01")
    none = _submit(desk_api, title="None", deadline=None)
    a = _submit(desk_api, title="A", deadline="2099-01-01")
    d = desk("statistician")
    assert _ids(d.get("/desk/requests").get_data(as_text=True)) == [a, b, none]
    assert _ids(d.get("/desk/requests?sort=-needed_by").get_data(as_text=True)) == [b, a, none]
    assert _ids(d.get("/desk/requests?sort=submitted").get_data(as_text=True)) == [a, none, b]


def test_pages_of_twenty_five(desk, desk_api):
    ids = [_submit(desk_api, title=f"P{i}", deadline=f"2099-01-{i + 1:02d}") for i in range(27)]
    d = desk("statistician")
    first = d.get("/desk/requests").get_data(as_text=True)
    assert _ids(first) == ids[:25] and "page 1 of 2" in first and 'rel="next"' in first
    second = d.get("/desk/requests?page=2").get_data(as_text=True)
    assert _ids(second) == ids[25:] and 'rel="prev"' in second
    # A page past the end shows the last one.
    assert _ids(d.get("/desk/requests?page=9").get_data(as_text=True)) == ids[25:]


def test_an_intake_token_sees_only_its_own_requests(desk, desk_api):
    own = _submit(desk_api, title="Own", deadline="2099-01-01", name="a.okafor")
    other = _submit(desk_api, title="Other", deadline="2099-01-01", name="l.nguyen")
    d = desk("intake", "a.okafor")
    html = d.get("/desk/requests").get_data(as_text=True)
    assert _ids(html) == [own] and "Other" not in html
    assert d.get(f"/desk/requests/{own}").status_code == 200
    hidden = d.get(f"/desk/requests/{other}")
    assert hidden.status_code == 404 and "Other" not in hidden.get_data(as_text=True)


def test_a_request_still_waiting_has_no_report_but_its_question(make_desk_app, settings):
    from tests.conftest import Api, Tokens
    from tests.desk.conftest import Desk

    app = make_desk_app(ANSWER_AT_SUBMISSION=False)
    tokens = Tokens(app)
    api = Api(app.test_client(), app, tokens)
    request_id = api.submit().get_json()["id"]
    with session_scope(app.extensions["sizewise"]["sessions"]) as db:
        assert store.get_request(db, request_id).status in ("received", "queued")
    d = Desk(app, tokens.secret("statistician"))
    d.sign_in()
    html = d.get(f"/desk/requests/{request_id}").get_data(as_text=True)
    assert "The report appears here once the request is computed" in html
    assert 'id="cancel"' in html and 'id="approve"' not in html
