"""The admins' token page: issue (the secret shown once), list, revoke; nobody else may."""

from __future__ import annotations

import re

from tests.desk.conftest import Desk


def test_an_admin_issues_a_token_and_sees_its_secret_once(desk, desk_app):
    admin = desk("admin", "it.desk")
    r = admin.post(
        "/desk/tokens", {"name": "Dr. Lin Park", "role": "statistician"}, form_page="/desk/tokens"
    )
    assert r.status_code == 200 and r.headers["Cache-Control"] == "no-store"
    secret = re.search(r'id="issued-secret">(sw_[^<]+)<', r.get_data(as_text=True)).group(1)
    listing = admin.get("/desk/tokens").get_data(as_text=True)
    assert "Dr. Lin Park" in listing and secret not in listing
    # The secret works: its holder signs in to the desk.
    assert Desk(desk_app, secret).sign_in().status_code == 302


def test_an_admin_revokes_a_token(desk, desk_tokens, desk_api):
    admin = desk("admin", "it.desk")
    token_id = desk_tokens.token_id("intake", "a.okafor")
    r = admin.post(f"/desk/tokens/{token_id}/revoke", form_page="/desk/tokens")
    assert r.status_code == 302
    html = admin.get("/desk/tokens").get_data(as_text=True)
    row = re.search(rf'data-token="{token_id}".*?</tr>', html, re.S).group(0)
    assert "revoked" in row and 'class="revoke"' not in row
    assert (
        desk_api.client.get(
            "/v1/requests", headers=desk_tokens.headers("intake", "a.okafor")
        ).status_code
        == 401
    )


def test_a_bad_role_is_named(desk):
    r = desk("admin").post("/desk/tokens", {"name": "x", "role": "owner"}, form_page="/desk/tokens")
    assert r.status_code == 422 and "role: must be one of intake" in r.get_data(as_text=True)


def test_only_admins_reach_the_token_page(desk):
    for role in ("intake", "statistician", "auditor"):
        d = desk(role)
        assert d.get("/desk/tokens").status_code == 403
        assert "Tokens</a>" not in d.get("/desk/requests").get_data(as_text=True)


def test_the_front_door_sends_each_role_to_its_page(desk):
    assert desk("admin").get("/desk/").headers["Location"] == "/desk/tokens"
    assert desk("statistician").get("/desk/").headers["Location"] == "/desk/requests"
    # Admins have no queue in the API, so none in the desk either.
    assert desk("admin").get("/desk/requests").status_code == 403
