"""Every route × every role, no token and a revoked token: allowed or refused as specified.

The expected matrix is written out here on its own (not read from service.api.auth), and the
routes come from ``app.url_map``: a new route without a row below fails the test.
"""

from __future__ import annotations

import re

import pytest

from service.store import tokens as token_store
from service.store.db import session_scope

PROBLEM = "application/problem+json"
ROLES = ("intake", "statistician", "auditor", "admin")
MISSING = "f" * 32

INT, S, A, ADM = "intake", "statistician", "auditor", "admin"
EVERYONE = {INT, S, A, ADM}
# (method, rule) -> roles allowed. None means public: no token needed.
MATRIX: dict[tuple[str, str], set[str] | None] = {
    ("GET", "/healthz"): None,
    ("GET", "/readyz"): None,
    ("GET", "/openapi.json"): None,  # public: a client generator reads it by URL (issue 16)
    ("GET", "/v1/catalogue"): EVERYONE,
    ("GET", "/v1/catalogue/question.schema.json"): EVERYONE,
    ("GET", "/v1/catalogue/request.schema.json"): EVERYONE,
    ("POST", "/v1/calculations"): {INT, S},
    ("POST", "/v1/requests"): {INT, S},
    ("GET", "/v1/requests"): {INT, S, A},
    ("GET", "/v1/requests/<request_id>"): {INT, S, A},
    ("POST", "/v1/requests/<request_id>/cancel"): {S},
    ("POST", "/v1/requests/<request_id>/assign"): {S},
    ("POST", "/v1/requests/<request_id>/comments"): {S},
    ("POST", "/v1/requests/<request_id>/approve"): {S},
    ("POST", "/v1/requests/<request_id>/return"): {S},
    ("POST", "/v1/requests/<request_id>/reruns"): {A},
    ("GET", "/v1/requests/<request_id>/reruns"): {INT, S, A},
    ("GET", "/v1/requests/<request_id>/reruns/<rerun_id>"): {INT, S, A},
    ("GET", "/v1/requests/<request_id>/bundle"): {S, A},
    ("GET", "/v1/requests/<request_id>/report"): {INT, S, A},
    ("GET", "/v1/requests/<request_id>/curve.svg"): {INT, S, A},
    ("GET", "/v1/requests/<request_id>/curve.png"): {INT, S, A},
    ("GET", "/v1/staff/requests"): {S, A},
    ("POST", "/v1/requests/<request_id>/report-links"): {INT, S, A},
    ("POST", "/v1/requests/<request_id>/report-links/revoke"): {INT, S, A},
    ("POST", "/v1/requests/<request_id>/explorations"): {S},
    ("GET", "/v1/requests/<request_id>/explorations"): {INT, S, A},
    ("GET", "/v1/requests/<request_id>/explorations/<exploration_id>"): {INT, S, A},
    ("POST", "/v1/tokens"): {ADM},
    ("GET", "/v1/tokens"): {ADM},
    ("POST", "/v1/tokens/<token_id>/revoke"): {ADM},
    ("GET", "/metrics"): {ADM},
    ("PUT", "/v1/webhook"): {INT, S},
    ("GET", "/v1/webhook"): {INT, S},
    ("DELETE", "/v1/webhook"): {INT, S},
    ("GET", "/v1/requests/<request_id>/deliveries"): {INT, S, A},
}

BODIES = {
    "/v1/calculations": {
        "question": {
            "outcome": "continuous",
            "layout": "two_groups",
            "find": "sample_size",
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1},
        }
    },
    "/v1/tokens": {"role": "intake", "name": "matrix check"},
    "/v1/requests/<request_id>/assign": {"to": "j.moreau"},
    "/v1/requests/<request_id>/comments": {"text": "Which SD source?"},
    "/v1/requests/<request_id>/approve": {"note": "ok"},
    "/v1/requests/<request_id>/return": {"note": "ok"},
    "/v1/requests/<request_id>/explorations": {
        "type": "sensitivity_grid",
        "grid": {"alpha": [0.05, 0.01]},
    },
    "/v1/webhook": {"url": "https://hooks.northbridge-general.example/sizewise"},
}


def _routes(app) -> set[tuple[str, str]]:
    found = set()
    for rule in app.url_map.iter_rules():
        # Flask's built-in static route serves no API data (there is no static folder); the
        # desk's pages take a session cookie, not a bearer token: tests/desk/test_desk_access.py.
        if rule.endpoint == "static" or rule.rule.startswith("/desk/"):
            continue
        found |= {(m, rule.rule) for m in rule.methods - {"HEAD", "OPTIONS"}}
    return found


def test_every_route_has_a_matrix_row(app):
    assert _routes(app) == set(MATRIX)


def _call(client, api, method: str, rule: str, ids: dict[str, str], headers: dict):
    path = re.sub(r"<([^<>]+)>", lambda m: ids[m.group(1)], rule)
    body = BODIES.get(rule)
    if (method, rule) == ("POST", "/v1/requests"):
        body = api.request_body()
    if method in ("GET", "DELETE") or body is None:
        return client.open(path, method=method, headers=headers)
    return client.open(path, method=method, json=body, headers=headers)


@pytest.mark.parametrize("method,rule", sorted(MATRIX))
def test_role_matrix(app, anon_client, api, tokens, method, rule):
    allowed = MATRIX[(method, rule)]
    request_id = api.submit(role="intake", name="a.okafor").get_json()["id"]
    with session_scope(api.sessions()) as session:
        victim, _ = token_store.create_token(session, "intake", "to be revoked")
        revoked_id, revoked_secret = token_store.create_token(session, "statistician", "gone")
        token_store.revoke_token(session, revoked_id)
    ids = {
        "request_id": request_id,
        "rerun_id": MISSING,
        "exploration_id": MISSING,
        "token_id": victim,
    }

    callers = {"no token": {}, "revoked": {"Authorization": f"Bearer {revoked_secret}"}}
    # The intake caller is the request's submitter, so ownership does not hide it here.
    callers.update(
        {role: tokens.headers(role, "a.okafor" if role == INT else None) for role in ROLES}
    )
    for who, headers in callers.items():
        r = _call(anon_client, api, method, rule, ids, headers)
        if allowed is None or who in allowed:
            assert r.status_code not in (401, 403), (who, r.get_json())
            continue
        assert r.status_code == (401 if who in ("no token", "revoked") else 403), (
            who,
            r.status_code,
        )
        assert r.mimetype == PROBLEM
        body = r.get_json()
        assert body["status"] == r.status_code and body["instance"]
        if r.status_code == 401:
            assert r.headers["WWW-Authenticate"].startswith("Bearer")
        else:
            assert f"'{who}'" in body["detail"] and body["allowed_roles"] == sorted(allowed)


@pytest.mark.parametrize(
    "header,needle",
    [
        (None, "Authorization: Bearer"),
        ("Basic YTpi", "got scheme 'Basic'"),
        ("Bearer", "got scheme 'Bearer'"),
        ("Bearer sw_not-a-real-token", "unknown or revoked"),
        ("Bearer " + "x" * 300, "unknown or revoked"),
    ],
)
def test_401_says_what_is_wrong(anon_client, header, needle):
    headers = {} if header is None else {"Authorization": header}
    r = anon_client.get("/v1/requests", headers=headers)
    assert r.status_code == 401 and r.mimetype == PROBLEM
    assert needle in r.get_json()["detail"]
    assert list(r.get_json()["errors"]) == ["headers.Authorization"]
    assert r.headers["WWW-Authenticate"].startswith('Bearer realm="sizewise"')


def test_a_revoked_token_stops_working_at_once(anon_client, api, tokens, auth):
    headers = auth("statistician", "r.patel")
    assert anon_client.get("/v1/requests", headers=headers).status_code == 200
    token_id = tokens.token_id("statistician", "r.patel")
    r = anon_client.post(f"/v1/tokens/{token_id}/revoke", headers=auth("admin"))
    assert r.status_code == 200 and r.get_json()["revoked_at"]
    assert anon_client.get("/v1/requests", headers=headers).status_code == 401


def test_the_actor_is_the_token_name_and_role(api):
    body = api.submit(role="statistician", name="Dr. Lin Park").get_json()
    assert body["history"][0]["actor"] == "Dr. Lin Park (statistician)"


def test_openapi_declares_bearer_security(client):
    spec = client.get("/openapi.json").get_json()
    scheme = spec["components"]["securitySchemes"]["bearer"]
    assert (scheme["type"], scheme["scheme"]) == ("http", "bearer")
    assert spec["paths"]["/healthz"]["get"]["security"] == []
    # A client generator fetches the document before it holds a token.
    assert spec["paths"]["/openapi.json"]["get"]["security"] == []
    submit = spec["paths"]["/v1/requests"]["post"]
    assert submit["security"] == [{"bearer": []}]
    assert {"401", "403", "429"} <= set(submit["responses"])
    assert "/v1/tokens" in spec["paths"] and "/v1/tokens/{token_id}/revoke" in spec["paths"]
