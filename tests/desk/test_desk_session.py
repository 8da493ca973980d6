"""Signing in and out of the desk: the cookie, CSRF, revocation, idle expiry, and the API's
independence from both (Flask test client; the browser tests drive the same in Chromium)."""

from __future__ import annotations

from datetime import timedelta

from sqlalchemy import select

from service.store import tokens as token_store
from service.store.db import session_scope
from service.store.models import DeskSession
from tests.conftest import Tokens
from tests.desk.conftest import Desk, csrf_of


def _sessions(app):
    return app.extensions["sizewise"]["sessions"]


def test_sign_in_sets_an_httponly_samesite_secure_cookie_for_the_desk_only(desk_app, desk_tokens):
    d = Desk(desk_app, desk_tokens.secret("statistician", "j.moreau"))
    r = d.sign_in()
    assert r.status_code == 302 and r.headers["Location"] == "/desk/"
    cookie = next(c for c in r.headers.getlist("Set-Cookie") if c.startswith("sizewise_desk="))
    attributes = {part.strip().split("=")[0] for part in cookie.split(";")}
    assert {"Secure", "HttpOnly", "Path"} <= attributes
    assert "SameSite=Lax" in cookie and "Path=/desk" in cookie
    # The cookie names a server-side session; the token's secret is neither in it nor stored.
    assert d.secret not in cookie
    with session_scope(_sessions(desk_app)) as db:
        row = db.scalars(select(DeskSession)).one()
        assert row.token_id == desk_tokens.token_id("statistician", "j.moreau")
        assert row.ended_at is None
    page = d.get("/desk/requests")
    assert page.status_code == 200 and "j.moreau (statistician)" in page.get_data(as_text=True)


def test_the_secure_flag_follows_the_setting(make_desk_app):
    app = make_desk_app(DESK_SECURE_COOKIE=False)
    d = Desk(app, Tokens(app).secret("statistician"))
    cookie = next(c for c in d.sign_in().headers.getlist("Set-Cookie") if "sizewise_desk=" in c)
    assert "Secure" not in cookie and "HttpOnly" in cookie


def test_a_wrong_token_is_refused_with_a_readable_message(desk_app):
    d = Desk(desk_app, "sw_not-a-token")
    r = d.sign_in()
    assert r.status_code == 401
    assert "unknown or revoked" in r.get_data(as_text=True)
    assert d.get("/desk/requests").status_code == 302


def test_pages_without_a_session_send_the_browser_to_sign_in(desk_app):
    client = desk_app.test_client()
    r = client.get("/desk/requests?status=computed")
    assert r.status_code == 302
    assert r.headers["Location"].startswith("/desk/sign-in?next=")
    assert (
        "status%3Dcomputed" in r.headers["Location"] or "status=computed" in r.headers["Location"]
    )
    page = client.get(r.headers["Location"]).get_data(as_text=True)
    assert "Sign in with your token" in page


def test_signing_in_returns_to_the_page_asked_for_but_never_off_the_desk(desk_app, desk_tokens):
    secret = desk_tokens.secret("statistician")
    assert Desk(desk_app, secret).sign_in("/desk/tokens").headers["Location"] == "/desk/tokens"
    for target in ("https://elsewhere.example/desk/", "//elsewhere.example/desk/", "/v1/tokens"):
        assert Desk(desk_app, secret).sign_in(target).headers["Location"] == "/desk/"


def test_a_form_without_its_csrf_token_is_refused(desk, desk_api):
    request_id = desk_api.submit().get_json()["id"]
    d = desk("statistician", "j.moreau")
    r = d.client.post(f"/desk/requests/{request_id}/comment", data={"text": "Which SD source?"})
    assert r.status_code == 400
    assert "The CSRF token is missing" in r.get_data(as_text=True)
    forged = d.client.post(
        f"/desk/requests/{request_id}/comment", data={"text": "x", "csrf_token": "forged"}
    )
    assert forged.status_code == 400
    history = desk_api.client.get(
        f"/v1/requests/{request_id}", headers=desk_api.tokens.headers("statistician", "j.moreau")
    ).get_json()["history"]
    assert not [e for e in history if e["action"] == "comment"]


def test_the_sign_in_form_itself_needs_its_csrf_token(desk_app, desk_tokens):
    client = desk_app.test_client()
    r = client.post("/desk/sign-in", data={"token": desk_tokens.secret("statistician")})
    assert r.status_code == 400


def test_the_api_needs_no_csrf_token_and_takes_no_desk_cookie(desk, desk_api, desk_tokens):
    request_id = desk_api.submit().get_json()["id"]
    r = desk_api.post(
        f"/v1/requests/{request_id}/comments", {"text": "Bearer calls need no form token"}
    )
    assert r.status_code == 201
    d = desk("statistician", "j.moreau")
    cookie = d.client.get_cookie("sizewise_desk", path="/desk")
    assert cookie is not None
    # A browser holding a desk session is still a stranger to the API.
    bare = d.client.get("/v1/requests", headers={"Cookie": f"sizewise_desk={cookie.value}"})
    assert bare.status_code == 401


def test_sign_out_ends_the_session_on_the_server(desk):
    d = desk("statistician", "j.moreau")
    cookie = d.client.get_cookie("sizewise_desk", path="/desk").value
    token = csrf_of(d.get("/desk/requests").get_data(as_text=True))
    r = d.client.post("/desk/sign-out", data={"csrf_token": token})
    assert r.status_code == 302 and r.headers["Location"] == "/desk/sign-in"
    assert d.get("/desk/requests").status_code == 302
    # The old cookie, replayed, opens nothing: the session ended on the server.
    d.client.set_cookie("sizewise_desk", cookie, path="/desk")
    r = d.get("/desk/requests")
    assert r.status_code == 302
    assert "You signed out" in d.get(r.headers["Location"]).get_data(as_text=True)


def test_a_revoked_token_closes_its_desk_session_on_the_next_page(desk, desk_tokens):
    d = desk("statistician", "r.patel")
    admin = desk("admin", "it.desk")
    token_id = desk_tokens.token_id("statistician", "r.patel")
    assert (
        admin.post(f"/desk/tokens/{token_id}/revoke", form_page="/desk/tokens").status_code == 302
    )
    r = d.get("/desk/requests")
    assert r.status_code == 302
    assert "Your token was revoked" in d.get(r.headers["Location"]).get_data(as_text=True)


def test_a_token_revoked_elsewhere_closes_the_desk_too(desk_app, desk, desk_tokens):
    d = desk("statistician", "r.patel")
    with session_scope(_sessions(desk_app)) as db:
        # As `sizewise tokens revoke` does it, outside this application.
        token_store.revoke_token(db, desk_tokens.token_id("statistician", "r.patel"), actor="cli")
    assert d.get("/desk/requests").status_code == 302


def _age(db, *, minutes: int) -> None:
    """Move every session's last use ``minutes`` into the past (no waiting in a test)."""
    for row in db.scalars(select(DeskSession)):
        row.last_seen_at = row.last_seen_at - timedelta(minutes=minutes)


def test_an_idle_session_expires(desk_app, desk):
    d = desk("statistician", "j.moreau")
    assert d.get("/desk/requests").status_code == 200
    with session_scope(_sessions(desk_app)) as db:
        _age(db, minutes=31)
    r = d.get("/desk/requests")
    assert r.status_code == 302
    page = d.get(r.headers["Location"]).get_data(as_text=True)
    assert "ended after 30 minutes without activity" in page
    with session_scope(_sessions(desk_app)) as db:
        assert db.scalars(select(DeskSession.end_reason)).one() == "idle"


def test_a_session_in_use_stays_open(desk_app, desk):
    d = desk("statistician", "j.moreau")
    with session_scope(_sessions(desk_app)) as db:
        _age(db, minutes=29)
    assert d.get("/desk/requests").status_code == 200
    assert d.get("/desk/requests").status_code == 200


def test_every_page_checks_the_token_itself_not_only_the_session(desk_app, desk, desk_tokens):
    from service.api.auth import TOKEN_CACHE
    from service.store.models import ApiToken
    from service.store.types import utcnow

    d = desk("statistician", "r.patel")
    token_id = desk_tokens.token_id("statistician", "r.patel")
    with session_scope(_sessions(desk_app)) as db:
        # Revoked by hand: the session row stays live, only the token changes.
        db.get(ApiToken, token_id).revoked_at = utcnow()
    # What another process's revocation looks like once this one's 1 s token cache has lapsed.
    desk_app.extensions["sizewise"][TOKEN_CACHE].forget(token_id)
    r = d.get("/desk/requests")
    assert r.status_code == 302
    assert "Your token was revoked" in d.get(r.headers["Location"]).get_data(as_text=True)
    with session_scope(_sessions(desk_app)) as db:
        assert db.scalars(select(DeskSession.end_reason)).one() == "revoked"


def test_the_sweeper_deletes_sessions_a_day_past_their_idle_limit(desk_app, desk, desk_tokens):
    from service.store.desk_sessions import KEEP
    from workers import sweeper

    # Three statisticians' browsers: one unused past the idle limit plus a day, one past the
    # idle limit only, one in use. Ages are moved back by hand (no waiting in a test).
    old, idle, live = (desk("statistician", name) for name in ("j.moreau", "r.patel", "a.ng"))
    limit = timedelta(minutes=30)
    with session_scope(_sessions(desk_app)) as db:
        for name, age in (("j.moreau", limit + KEEP), ("r.patel", limit)):
            row = db.scalars(
                select(DeskSession).where(
                    DeskSession.token_id == desk_tokens.token_id("statistician", name)
                )
            ).one()
            row.last_seen_at = row.last_seen_at - age - timedelta(minutes=1)
    sweeper.sweep_once(desk_app.extensions["sizewise"]["config"])
    with session_scope(_sessions(desk_app)) as db:
        left = set(db.scalars(select(DeskSession.token_id)))
    assert left == {desk_tokens.token_id("statistician", n) for n in ("r.patel", "a.ng")}
    # The deleted session opens nothing: its browser is asked to sign in, with no reason left.
    r = old.get("/desk/requests")
    assert r.status_code == 302
    assert "Sign in with your token" in old.get(r.headers["Location"]).get_data(as_text=True)
    # The one kept still says why it ended; the one in use stays open.
    r = idle.get("/desk/requests")
    assert "ended after 30 minutes" in idle.get(r.headers["Location"]).get_data(as_text=True)
    assert live.get("/desk/requests").status_code == 200
