"""The desk's routes in the one access table: each page takes its API endpoint's roles.

The expected roles are written out here on their own (as tests/security/test_access_matrix.py
does for the API); the routes come from ``app.url_map``, so a new desk route without a row fails.
"""

from __future__ import annotations

import re

import pytest

from service.api.auth import ACCESS, PAGE_MIRRORS, PAGES_PUBLIC

INT, S, A, ADM = "intake", "statistician", "auditor", "admin"
ROLES = (INT, S, A, ADM)
MISSING = "f" * 32
# (method, rule) -> roles allowed; None: no session needed (the sign-in form, sign-out).
MATRIX: dict[tuple[str, str], set[str] | None] = {
    ("GET", "/desk/sign-in"): None,
    ("POST", "/desk/sign-in"): None,
    ("POST", "/desk/sign-out"): None,
    ("GET", "/desk/"): {INT, S, A, ADM},
    ("GET", "/desk/requests"): {INT, S, A},
    ("GET", "/desk/requests/<request_id>"): {INT, S, A},
    ("POST", "/desk/requests/<request_id>/assign"): {S},
    ("POST", "/desk/requests/<request_id>/comment"): {S},
    ("POST", "/desk/requests/<request_id>/approve"): {S},
    ("POST", "/desk/requests/<request_id>/return"): {S},
    ("POST", "/desk/requests/<request_id>/cancel"): {S},
    ("POST", "/desk/requests/<request_id>/explore"): {S},
    ("POST", "/desk/requests/<request_id>/rerun"): {A},
    ("GET", "/desk/intake"): {INT, S},
    ("GET", "/desk/intake/<outcome>/<layout>"): {INT, S},
    ("POST", "/desk/intake/<outcome>/<layout>"): {INT, S},
    ("GET", "/desk/tokens"): {ADM},
    ("POST", "/desk/tokens"): {ADM},
    ("POST", "/desk/tokens/<token_id>/revoke"): {ADM},
}


def _desk_routes(app) -> set[tuple[str, str]]:
    return {
        (m, rule.rule)
        for rule in app.url_map.iter_rules()
        if rule.rule.startswith("/desk/")
        for m in rule.methods - {"HEAD", "OPTIONS"}
    }


def test_every_desk_route_has_a_row(desk_app):
    assert _desk_routes(desk_app) == set(MATRIX)


def test_every_desk_endpoint_is_in_the_access_table_or_public(desk_app):
    for rule in desk_app.url_map.iter_rules():
        if rule.endpoint.startswith("desk."):
            assert rule.endpoint in ACCESS or rule.endpoint in PAGES_PUBLIC, rule.endpoint


def test_each_page_takes_exactly_its_api_endpoints_roles():
    for page, api in PAGE_MIRRORS.items():
        assert ACCESS[page] == ACCESS[api], page


@pytest.mark.parametrize("method,rule", sorted(k for k, v in MATRIX.items() if v is not None))
def test_desk_role_matrix(desk, desk_api, desk_tokens, method, rule):
    allowed = MATRIX[(method, rule)]
    request_id = desk_api.submit(role="intake", name="a.okafor").get_json()["id"]
    ids = {
        "request_id": request_id,
        "token_id": desk_tokens.token_id("intake", "victim"),
        "outcome": "continuous",
        "layout": "two_groups",
    }
    path = re.sub(r"<([^<>]+)>", lambda m: ids[m.group(1)], rule)
    for role in ROLES:
        # The intake caller is the request's submitter, so ownership does not hide it here.
        d = desk(role, "a.okafor" if role == INT else None)
        form_page = "/desk/tokens" if role == ADM else "/desk/requests"
        r = d.get(path) if method == "GET" else d.post(path, {}, form_page=form_page)
        if role in allowed:
            assert r.status_code != 403, (role, r.status_code)
        else:
            assert r.status_code == 403, (role, r.status_code)
            assert "Your role" in r.get_data(as_text=True)


@pytest.mark.parametrize("method,rule", sorted(k for k, v in MATRIX.items() if v is not None))
def test_without_a_session_every_page_sends_the_browser_to_sign_in(desk_app, method, rule):
    path = re.sub(r"<[^<>]+>", MISSING, rule)
    client = desk_app.test_client()
    r = client.get(path) if method == "GET" else client.post(path)
    # A POST without a session stops at sign-in before its (missing) CSRF token is looked at.
    assert r.status_code == 302 and r.headers["Location"].startswith("/desk/sign-in")
