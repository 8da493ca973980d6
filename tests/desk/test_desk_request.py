"""The request page and its forms, for each role: the same transitions, checks and refusals as
the API, said in readable pages."""

from __future__ import annotations

import html
import re

from service.desk import explorations
from workers import tasks


def _page(d, request_id: str) -> str:
    r = d.get(f"/desk/requests/{request_id}")
    assert r.status_code == 200
    return r.get_data(as_text=True)


def _status(html: str) -> str:
    return re.search(r'id="request-status" data-status="(\w+)"', html).group(1)


def _post(d, request_id: str, action: str, data: dict | None = None):
    return d.post(
        f"/desk/requests/{request_id}/{action}", data, form_page=f"/desk/requests/{request_id}"
    )


def test_a_statistician_sees_the_report_the_forms_and_the_history(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    html = _page(desk("statistician", "j.moreau"), request_id)
    # Today's report, as the API renders it: its sections and the inline curve.
    assert 'id="report"' in html and 'id="justification-text"' in html and "<svg" in html
    for button in ("assign-me", "comment", "approve", "return", "ask-grid", "ask-panel"):
        assert f'id="{button}"' in html, button
    assert 'id="rerun"' not in html  # auditors only
    assert 'data-action="submitted"' in html and "a.okafor (intake)" in html


def test_assign_comment_and_approve_change_the_request(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("statistician", "j.moreau")
    assert _post(d, request_id, "assign", {"me": "1"}).status_code == 302
    assert _post(d, request_id, "assign", {"to": "r.patel"}).status_code == 302
    assert (
        _post(d, request_id, "comment", {"text": "SD taken from the 2023 pilot."}).status_code
        == 302
    )
    r = _post(d, request_id, "approve", {"note": "Matches the pilot's SD."})
    assert r.status_code == 302 and r.headers["Location"] == f"/desk/requests/{request_id}"
    html = _page(d, request_id)
    assert _status(html) == "approved" and "Approved." in html
    assert '<span id="assignee">r.patel</span>' in html
    events = re.findall(r'data-action="(\w+)"', html)
    assert events.count("assigned") == 2 and "comment" in events and "approved" in events
    history = re.search(r'id="history".*?</section>', html, re.S).group(0)
    assert "SD taken from the 2023 pilot." in history and "Matches the pilot&#39;s SD." in history
    # The API sees the same request (same store, same audit chain).
    body = desk_api.client.get(
        f"/v1/requests/{request_id}", headers=desk_api.tokens.headers("statistician")
    ).get_json()
    assert body["status"] == "approved" and body["assigned_to"] == "r.patel"


def test_return_with_a_note(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("statistician", "j.moreau")
    assert (
        _post(d, request_id, "return", {"note": "Please give the SD's source."}).status_code == 302
    )
    assert _status(_page(d, request_id)) == "returned"


def test_refused_transitions_say_why_in_a_page(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("statistician", "j.moreau")
    assert _post(d, request_id, "approve", {"note": "fine"}).status_code == 302
    again = _post(d, request_id, "approve", {"note": "again"})
    assert again.status_code == 409
    text = again.get_data(as_text=True)
    assert "cannot approve a request whose status is &#39;approved&#39;" in text
    assert "Back to the request" in text
    cancel = _post(d, request_id, "cancel")
    assert cancel.status_code == 409 and "cannot cancel" in cancel.get_data(as_text=True)


def test_a_missing_note_is_named(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    r = _post(desk("statistician"), request_id, "approve", {"note": "  "})
    assert r.status_code == 422
    assert "note: Missing data for required field." in r.get_data(as_text=True)


def test_four_eyes_applies_in_the_desk_as_in_the_api(desk, desk_api):
    request_id = desk_api.submit(role="statistician", name="j.moreau").get_json()["id"]
    r = _post(desk("statistician", "j.moreau"), request_id, "approve", {"note": "mine"})
    assert r.status_code == 403
    assert "four-eyes review needs another statistician" in r.get_data(as_text=True)


def test_cancel_a_waiting_request(make_desk_app):
    from tests.conftest import Api, Tokens
    from tests.desk.conftest import Desk

    app = make_desk_app(ANSWER_AT_SUBMISSION=False)
    tokens = Tokens(app)
    request_id = Api(app.test_client(), app, tokens).submit().get_json()["id"]
    d = Desk(app, tokens.secret("statistician"))
    d.sign_in()
    assert _post(d, request_id, "cancel", {"reason": "Protocol withdrawn."}).status_code == 302
    html = _page(d, request_id)
    assert _status(html) == "cancelled" and "Protocol withdrawn." in html


def _explorations_listed(desk_api, request_id: str) -> list[tuple[str, dict]]:
    """(type, params) of the request's grids and panels, as GET .../explorations lists them."""
    items = desk_api.client.get(
        f"/v1/requests/{request_id}/explorations", headers=desk_api.tokens.headers("statistician")
    ).get_json()["items"]
    return [(item["type"], item["params"]) for item in items]


def test_ask_for_a_sensitivity_grid_and_a_robustness_panel(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("statistician")
    grid = {"type": explorations.GRID, "path": "alpha", "values": "0.05, 0.01"}
    assert _post(d, request_id, "explore", grid).status_code == 302
    assert _post(d, request_id, "explore", {"type": explorations.PANEL}).status_code == 302
    listed = _explorations_listed(desk_api, request_id)
    assert [kind for kind, _params in listed] == [explorations.GRID, explorations.PANEL]
    assert listed[0][1]["grid"] == {"alpha": [0.05, 0.01]}
    bad = _post(d, request_id, "explore", dict(grid, values="a, b"))
    assert bad.status_code == 422 and "numbers separated by commas" in bad.get_data(as_text=True)
    # a value the question could not hold is refused in the submission's words, nothing stored
    refused = _post(d, request_id, "explore", dict(grid, values="0.05, 0.7"))
    text = html.unescape(refused.get_data(as_text=True))
    assert refused.status_code == 422 and "alpha: must be in (0, 0.5]; got 0.7" in text
    assert len(_explorations_listed(desk_api, request_id)) == 2


def test_an_auditor_sees_no_approve_button_and_cannot_approve_by_posting(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("auditor", "k.ito")
    html = _page(d, request_id)
    assert 'id="approve"' not in html and 'id="return"' not in html and 'id="assign-me"' not in html
    r = _post(d, request_id, "approve", {"note": "not mine to give"})
    assert r.status_code == 403
    assert "Your role (auditor) may not do this; it is for: statistician." in r.get_data(
        as_text=True
    )
    assert _status(_page(d, request_id)) == "computed"


def test_an_auditor_reruns_and_reads_the_verdict(desk, desk_app, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("auditor", "k.ito")
    assert 'id="rerun"' in _page(d, request_id)
    assert _post(d, request_id, "rerun", {"note": "Annual audit"}).status_code == 302
    reruns = desk_api.client.get(
        f"/v1/requests/{request_id}/reruns", headers=desk_api.tokens.headers("auditor", "k.ito")
    ).get_json()["items"]
    assert len(reruns) == 1
    config = desk_app.extensions["sizewise"]["config"]
    assert tasks.run_rerun_job(reruns[0]["id"], config) == "done"
    html = _page(d, request_id)
    assert '<strong class="verdict">identical</strong> to the stored result' in html


def test_a_statistician_cannot_rerun(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    assert _post(desk("statistician"), request_id, "rerun").status_code == 403


def test_an_unknown_request_is_a_readable_404(desk):
    r = desk("statistician").get("/desk/requests/" + "f" * 32)
    assert r.status_code == 404 and "no request with id" in r.get_data(as_text=True)


def test_what_people_write_is_escaped(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("statistician")
    _post(d, request_id, "comment", {"text": "<script>alert(1)</script>"})
    html = _page(d, request_id)
    assert "<script>alert(1)</script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
