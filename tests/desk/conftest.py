"""Desk fixtures: an app that answers analytic questions at submission, and signed-in clients."""

from __future__ import annotations

import re

import pytest

from service import create_app
from tests.conftest import Api, Tokens

_CSRF = re.compile(r'name="csrf_token" value="([^"]+)"')


def csrf_of(html: str) -> str:
    """The CSRF token of the first form on a desk page."""
    match = _CSRF.search(html)
    assert match, "the page has no form with a CSRF token"
    return match.group(1)


class Desk:
    """A browser-like test client of the desk: signs in with a token, posts forms with CSRF."""

    def __init__(self, app, secret: str):
        self.client = app.test_client()
        self.secret = secret

    def sign_in(self, next_path: str = ""):
        form = self.client.get("/desk/sign-in")
        data = {"token": self.secret, "csrf_token": csrf_of(form.get_data(as_text=True))}
        if next_path:
            data["next"] = next_path
        return self.client.post("/desk/sign-in", data=data)

    def get(self, path: str, **kwargs):
        return self.client.get(path, **kwargs)

    def post(self, path: str, data: dict | None = None, *, form_page: str = "/desk/requests"):
        """Post a form with the CSRF token a desk page (``form_page``) carries."""
        token = csrf_of(self.client.get(form_page).get_data(as_text=True))
        return self.client.post(path, data={**(data or {}), "csrf_token": token})


@pytest.fixture
def make_desk_app(settings):
    """``make_desk_app(**extra)``: the service with the desk, answering analytic questions at
    submission, with extra settings."""
    made = []

    def build(**extra):
        application = create_app(
            {**settings, "ANSWER_AT_SUBMISSION": True, "DESK_IDLE_MINUTES": 30, **extra}
        )
        made.append(application)
        return application

    yield build
    for application in made:
        application.extensions["sizewise"]["engine"].dispose()


@pytest.fixture
def desk_app(make_desk_app):
    """The service with the desk (Secure cookie, as outside local runs)."""
    return make_desk_app()


@pytest.fixture
def desk_tokens(desk_app) -> Tokens:
    return Tokens(desk_app)


@pytest.fixture
def desk_api(desk_app, desk_tokens) -> Api:
    """API calls (bearer tokens) against the desk's application, to arrange requests."""
    return Api(desk_app.test_client(), desk_app, desk_tokens)


@pytest.fixture
def desk(desk_app, desk_tokens):
    """``desk(role, name=None)``: a client signed in with a token of that role."""

    def signed_in(role: str, name: str | None = None) -> Desk:
        client = Desk(desk_app, desk_tokens.secret(role, name))
        response = client.sign_in()
        assert response.status_code == 302, response.get_data(as_text=True)
        return client

    return signed_in
