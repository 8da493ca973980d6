"""Signing in to the desk: a token typed once, then a server-side session behind a cookie.

The cookie (Flask's signed session, HttpOnly, SameSite=Lax, Secure unless
SIZEWISE_DESK_SECURE_COOKIE is off, path /desk) holds a random session secret and the CSRF
secret; the database holds the session (``store.desk_sessions``). Every page checks the session
(ended? idle too long?) and then its token through the API's own token lookup, so a revoked
token closes the desk as it closes the API.
"""

from __future__ import annotations

import hashlib
import hmac
from datetime import timedelta

from flask import Flask, session

from service.api.auth import SESSION_CALLER, caller_for_digest, link_key
from service.api.context import sessions, settings
from service.api.identity import Caller
from service.store import desk_sessions as store
from service.store import tokens as token_store
from service.store.db import session_scope
from service.store.models import ApiToken

SESSION_KEY = "desk_session"
COOKIE_NAME = "sizewise_desk"

_ENDED = {
    "unknown": "Sign in with your token to open the desk.",
    "signed_out": "You signed out. Sign in again to continue.",
    "idle": "Your session ended after {minutes} minutes without activity. Sign in again.",
    "revoked": "Your token was revoked; ask an admin for a new one.",
}


class SignInNeeded(Exception):
    """No live desk session: the page sends the browser to the sign-in form with ``message``."""

    def __init__(self, message: str):
        super().__init__(message)
        self.message = message


def configure(app: Flask) -> None:
    """Set the session cookie's attributes and signing key; install the per-page check."""
    config = app.extensions["sizewise"]["config"]
    # A key of its own, derived from the report-link key every API process shares.
    app.secret_key = hmac.new(link_key(config), b"desk session cookie", hashlib.sha256).hexdigest()
    app.config.update(
        SESSION_COOKIE_NAME=COOKIE_NAME,
        SESSION_COOKIE_PATH="/desk",
        SESSION_COOKIE_HTTPONLY=True,
        SESSION_COOKIE_SAMESITE="Lax",
        SESSION_COOKIE_SECURE=bool(config["DESK_SECURE_COOKIE"]),
    )
    app.extensions["sizewise"][SESSION_CALLER] = signed_in_caller


def _idle() -> timedelta:
    return store.idle_limit(settings())


def sign_in(secret: str) -> Caller | None:
    """Open a session for a valid token secret and set the cookie; None for a bad secret."""
    secret = (secret or "").strip()
    if not secret.startswith(token_store.TOKEN_PREFIX) or len(secret) > 200:
        return None
    caller = caller_for_digest(token_store.hash_secret(secret))
    if caller is None:
        return None
    with session_scope(sessions()) as db:
        session_secret = store.open_session(db, caller.token_id)
    session.clear()  # a fresh cookie (and CSRF secret) for every sign-in
    session[SESSION_KEY] = session_secret
    return caller


def sign_out() -> None:
    """End the browser's session on the server and forget the cookie."""
    secret = session.get(SESSION_KEY)
    if secret:
        with session_scope(sessions()) as db:
            row, reason = store.live_session(db, secret, _idle())
            if row is not None and reason is None:
                store.end_session(db, row, "signed_out")
    session.clear()


def signed_in_caller() -> Caller:
    """The caller of the browser's live session; SignInNeeded when there is none."""
    secret = session.get(SESSION_KEY)
    if not secret:
        raise SignInNeeded(_ENDED["unknown"])
    with session_scope(sessions()) as db:
        row, reason = store.live_session(db, secret, _idle())
        token = db.get(ApiToken, row.token_id) if row is not None and reason is None else None
        digest = token.secret_sha256 if token is not None else None
    caller = caller_for_digest(digest) if digest else None
    if caller is None and reason is None:
        reason = "revoked"
        with session_scope(sessions()) as db:
            row, _ = store.live_session(db, secret, _idle())
            if row is not None:
                store.end_session(db, row, "revoked")
    if reason is not None:
        session.clear()
        minutes = int(settings()["DESK_IDLE_MINUTES"])
        raise SignInNeeded(_ENDED.get(reason, _ENDED["unknown"]).format(minutes=minutes))
    return caller
