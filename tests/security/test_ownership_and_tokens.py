"""Intake sees only its own requests; tokens are issued once, stored hashed, listed without secrets."""

from __future__ import annotations

import hashlib

import pytest
from sqlalchemy import inspect, select, text

from service.store import tokens as token_store
from service.store.db import session_scope
from service.store.models import ApiToken


def _ids(response) -> set[str]:
    assert response.status_code == 200, response.get_json()
    return {item["id"] for item in response.get_json()["items"]}


def test_intake_lists_and_reads_only_its_own_requests(api, anon_client, auth):
    mine = api.submit(role="intake", name="a.okafor").get_json()["id"]
    theirs = api.submit(role="intake", name="l.park").get_json()["id"]
    by_statistician = api.submit(role="statistician", name="j.moreau").get_json()["id"]
    okafor, park = auth("intake", "a.okafor"), auth("intake", "l.park")

    assert _ids(anon_client.get("/v1/requests", headers=okafor)) == {mine}
    assert anon_client.get("/v1/requests", headers=okafor).get_json()["total"] == 1
    assert _ids(anon_client.get("/v1/requests", headers=park)) == {theirs}
    everything = {mine, theirs, by_statistician}
    assert _ids(anon_client.get("/v1/requests", headers=auth("statistician"))) == everything
    assert _ids(anon_client.get("/v1/requests", headers=auth("auditor"))) == everything

    assert anon_client.get(f"/v1/requests/{mine}", headers=okafor).status_code == 200
    assert anon_client.get(f"/v1/requests/{mine}/reruns", headers=okafor).status_code == 200
    for path in (f"/v1/requests/{theirs}", f"/v1/requests/{theirs}/reruns"):
        r = anon_client.get(path, headers=okafor)
        # Another's request answers exactly like a missing one: its existence is not revealed.
        assert r.status_code == 404 and r.get_json()["detail"] == f"no request with id '{theirs}'"
    assert anon_client.get(f"/v1/requests/{theirs}", headers=auth("auditor")).status_code == 200


def test_an_idempotency_key_of_another_client_neither_replays_nor_leaks(api):
    first = api.submit(key="ngh-031-v1", role="intake", name="a.okafor")
    assert first.status_code == 202
    other = api.submit(key="ngh-031-v1", role="intake", name="l.park")
    assert other.status_code == 422
    body = other.get_json()
    assert body["errors"] == {"headers.Idempotency-Key": ["already used by another client"]}
    assert first.get_json()["id"] not in other.get_data(as_text=True)


def _all_stored_text(app) -> str:
    """Every row of every table, as text: what someone holding a copy of the database sees."""
    engine = app.extensions["sizewise"]["engine"]
    chunks = []
    with engine.connect() as conn:
        for table in inspect(conn).get_table_names():
            chunks += [repr(tuple(row)) for row in conn.execute(text(f'SELECT * FROM "{table}"'))]
    return "\n".join(chunks)


def test_admin_issues_lists_and_revokes_and_the_secret_is_stored_hashed(api, anon_client, auth):
    admin = auth("admin", "it.office")
    r = anon_client.post("/v1/tokens", json={"role": "auditor", "name": "QA office"}, headers=admin)
    assert r.status_code == 201 and r.headers["Cache-Control"] == "no-store"
    created = r.get_json()
    secret = created["token"]
    assert secret.startswith("sw_") and len(secret) == 3 + 43  # token_urlsafe(32): 43 characters
    assert (created["role"], created["name"], created["revoked_at"]) == (
        "auditor",
        "QA office",
        None,
    )

    # The new token works at once, with its role.
    mine = {"Authorization": f"Bearer {secret}"}
    assert anon_client.get("/v1/requests", headers=mine).status_code == 200
    assert (
        anon_client.post("/v1/requests", json=api.request_body(), headers=mine).status_code == 403
    )

    listing = anon_client.get("/v1/tokens", headers=admin)
    assert listing.status_code == 200 and secret not in listing.get_data(as_text=True)
    row = next(t for t in listing.get_json()["items"] if t["id"] == created["id"])
    assert row["last_used_at"] is not None and "token" not in row

    # Only the SHA-256 is stored (formula: hashlib over the UTF-8 secret).
    stored = _all_stored_text(api.app)
    assert secret not in stored and secret[3:] not in stored
    with session_scope(api.sessions()) as session:
        token = session.scalar(select(ApiToken).where(ApiToken.id == created["id"]))
        assert token.secret_sha256 == hashlib.sha256(secret.encode()).hexdigest()

    revoked = anon_client.post(f"/v1/tokens/{created['id']}/revoke", headers=admin)
    assert revoked.status_code == 200
    first_time = revoked.get_json()["revoked_at"]
    again = anon_client.post(f"/v1/tokens/{created['id']}/revoke", headers=admin)
    assert again.get_json()["revoked_at"] == first_time
    assert anon_client.get("/v1/requests", headers=mine).status_code == 401


def test_token_endpoints_refuse_bad_input_naming_the_field(anon_client, auth):
    admin = auth("admin")
    r = anon_client.post("/v1/tokens", json={"role": "superuser", "name": "x"}, headers=admin)
    assert r.status_code == 422
    message = r.get_json()["errors"]["role"][0]
    assert "'superuser'" in message and "statistician" in message
    r = anon_client.post("/v1/tokens", json={"role": "intake", "name": ""}, headers=admin)
    assert list(r.get_json()["errors"]) == ["name"]
    # A right-to-left override would make the name print as something else in the audit trail.
    r = anon_client.post("/v1/tokens", json={"role": "intake", "name": "a\u202eb"}, headers=admin)
    assert list(r.get_json()["errors"]) == ["name"]
    # The message under the field's key does not name the field again.
    assert r.get_json()["errors"]["name"][0].startswith("must be 1-120 printable characters")
    r = anon_client.post("/v1/tokens", json={"role": "intake", "name": "a", "x": 1}, headers=admin)
    assert r.get_json()["errors"]["x"][0].startswith("unknown field; allowed:")
    for token_id in ("0" * 32, "nope"):
        r = anon_client.post(f"/v1/tokens/{token_id}/revoke", headers=admin)
        assert r.status_code == 404 and token_id in r.get_json()["detail"]


def test_store_functions(api):
    with session_scope(api.sessions()) as session:
        token_id, secret = token_store.create_token(session, "intake", "  ward 7 nurse  ")
    with session_scope(api.sessions()) as session:
        row = token_store.verify_token(session, secret)
        assert (row.id, row.name, row.role) == (token_id, "ward 7 nurse", "intake")
        assert token_store.verify_token(session, secret + "x") is None
        assert token_store.verify_token(session, secret[3:]) is None  # the prefix is required
        assert token_id in [t.id for t in token_store.list_tokens(session)]
        assert token_store.revoke_token(session, token_id).revoked_at is not None
        assert token_store.verify_token(session, secret) is None
        assert token_store.revoke_token(session, "0" * 32) is None
    bad = [("root", "x", "role"), ("intake", " ", "name"), ("intake", "a\tb", "name")]
    for role, name, field in bad:
        with pytest.raises(token_store.TokenInputError, match=f"^{field}: "):
            with session_scope(api.sessions()) as session:
                token_store.create_token(session, role, name)


def test_demo_token_is_kept_across_starts_and_replaced_only_when_its_secret_is_lost(
    api, anon_client
):
    with session_scope(api.sessions()) as session:
        first = token_store.ensure_demo_token(session)
    with session_scope(api.sessions()) as session:
        again = token_store.ensure_demo_token(session, first.secret)
    assert (first.kept, again.kept, again.secret, again.revoked) == (False, True, first.secret, ())
    with session_scope(api.sessions()) as session:
        second = token_store.ensure_demo_token(session, None)  # the saved secret is gone
        demo = [
            t for t in token_store.list_tokens(session) if t.name == token_store.DEMO_TOKEN_NAME
        ]
    assert second.secret != first.secret and not second.kept
    assert second.revoked == (demo[0].id,)
    assert [(t.role, t.revoked_at is None) for t in demo] == [
        ("statistician", False),
        ("statistician", True),
    ]

    def status(secret: str) -> int:
        return anon_client.get(
            "/v1/requests", headers={"Authorization": f"Bearer {secret}"}
        ).status_code

    assert (status(first.secret), status(second.secret)) == (401, 200)
    # A revoked secret on file is not kept: a new token replaces it.
    with session_scope(api.sessions()) as session:
        third = token_store.ensure_demo_token(session, first.secret)
    assert not third.kept and third.revoked == (demo[1].id,)
