"""Shared fixtures: a migrated database on SQLite and on PostgreSQL, and Flask test clients.

Each database is built once per session by ``alembic upgrade head`` and emptied before every
test. The PostgreSQL database is created fresh for the session and dropped afterwards. The
broker is kombu's filesystem transport in a temporary folder, so publishing needs no server.
Every API call needs a bearer token: ``client`` sends a statistician's, ``auth(role, name)``
returns the headers of a token of any role, and ``anon_client`` sends none.
Demo data is invented (Northbridge General Hospital research office).
"""

from __future__ import annotations

import copy
import os
import sys
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

# An editable install made before service/__init__.py existed maps `service` as a namespace
# package, which hides create_app; the checkout itself must win.
REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))
from flask.testing import FlaskClient  # noqa: E402
from sqlalchemy import delete  # noqa: E402

from service import create_app  # noqa: E402
from service.store import tokens as token_store  # noqa: E402
from service.store.db import make_engine, session_scope  # noqa: E402
from service.store.migrate import upgrade  # noqa: E402
from service.store.models import (  # noqa: E402
    ApiToken,
    AuditEvent,
    ChunkResult,
    DeskSession,
    Request,
    Rerun,
    Result,
    TokenSpend,
    Webhook,
    WebhookAttempt,
    WebhookMessage,
)

PG_HOST = "127.0.0.1"
PG_ADMIN_DSN = f"host={PG_HOST} port=5432 user=postgres dbname=postgres"
BACKENDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.services)]


def _skip_services() -> bool:
    return os.environ.get("SIZEWISE_SKIP_SERVICES") == "1"


def create_pg_database() -> tuple[str, str]:
    """Create an empty PostgreSQL database; return (name, SQLAlchemy URL)."""
    import psycopg

    name = f"sizewise_test_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(PG_ADMIN_DSN, autocommit=True, connect_timeout=5) as conn:
        conn.execute(f'CREATE DATABASE "{name}"')
    return name, f"postgresql+psycopg://postgres@{PG_HOST}:5432/{name}"


def drop_pg_database(name: str) -> None:
    """Drop a database made by create_pg_database, disconnecting any session still on it."""
    import psycopg

    with psycopg.connect(PG_ADMIN_DSN, autocommit=True, connect_timeout=5) as conn:
        conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


@pytest.fixture(scope="session", params=BACKENDS)
def database_url(request, tmp_path_factory) -> Iterator[str]:
    """A database migrated to head: a SQLite file, or a fresh PostgreSQL database."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path_factory.mktemp('db') / 'sizewise.db'}"
        upgrade(url)
        yield url
        return
    if _skip_services():
        pytest.skip("SIZEWISE_SKIP_SERVICES=1")
    name, url = create_pg_database()
    try:
        upgrade(url)
        yield url
    finally:
        drop_pg_database(name)


def empty_tables(url: str) -> None:
    """Delete every row (children first) so each test starts from an empty database."""
    engine = make_engine(url)
    with engine.begin() as conn:
        for model in (
            WebhookAttempt,
            WebhookMessage,
            Webhook,
            ChunkResult,
            Result,
            Rerun,
            AuditEvent,
            Request,
            DeskSession,
            ApiToken,
            TokenSpend,
        ):
            conn.execute(delete(model))
    engine.dispose()


@pytest.fixture
def settings(database_url: str, tmp_path: Path) -> dict:
    """Settings for one test: the shared database and a private filesystem broker."""
    empty_tables(database_url)
    return {
        "DATABASE_URL": database_url,
        "BROKER_URL": f"filesystem://{tmp_path / 'broker'}",
        # One count per test application; the shared counters have tests of their own.
        "RATELIMIT_STORAGE_URL": "memory://",
        "TESTING": True,
        # Most tests drive a queued request by hand; tests of the answer at submission turn
        # it on (it is on by default in service.config).
        "ANSWER_AT_SUBMISSION": False,
    }


@pytest.fixture
def app(settings: dict):
    """A Flask application on the test database."""
    application = create_app(settings)
    yield application
    application.extensions["sizewise"]["engine"].dispose()


class Tokens:
    """Issues one token per (role, name) on the app's database and remembers its secret."""

    def __init__(self, app):
        self.app = app
        self.secrets: dict[tuple[str, str], str] = {}
        self.ids: dict[tuple[str, str], str] = {}

    def secret(self, role: str, name: str | None = None) -> str:
        """The secret of the token of ``role`` held by ``name`` (default: the role)."""
        key = (role, name or role)
        if key not in self.secrets:
            with session_scope(self.app.extensions["sizewise"]["sessions"]) as session:
                self.ids[key], self.secrets[key] = token_store.create_token(session, *key)
        return self.secrets[key]

    def token_id(self, role: str, name: str | None = None) -> str:
        """The id of that token (issued on first use)."""
        self.secret(role, name)
        return self.ids[(role, name or role)]

    def headers(self, role: str, name: str | None = None) -> dict[str, str]:
        """Authorization headers carrying that token."""
        return {"Authorization": f"Bearer {self.secret(role, name)}"}


@pytest.fixture
def tokens(app) -> Tokens:
    """Token issuer for the test's application."""
    return Tokens(app)


@pytest.fixture
def auth(tokens) -> Callable[..., dict[str, str]]:
    """``auth(role, name=None)`` returns headers with a bearer token of that role."""
    return tokens.headers


@pytest.fixture
def anon_client(app) -> FlaskClient:
    """A test client that sends no token."""
    return app.test_client()


@pytest.fixture
def client(app, tokens) -> FlaskClient:
    """The Flask test client, sending a statistician's token unless a call passes its own."""
    test_client = app.test_client()
    test_client.environ_base["HTTP_AUTHORIZATION"] = (
        f"Bearer {tokens.secret('statistician', 'j.moreau')}"
    )
    return test_client


def question_body(**overrides) -> dict:
    """An analytic question (continuous outcome, two groups, d = 0.5, power 0.80) as posted."""
    question = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
    }
    question.update(overrides)
    return question


def request_body(question: dict | None = None, **overrides) -> dict:
    """A full submission for an invented Northbridge General Hospital protocol."""
    body = {
        "protocol": {
            "id": "NGH-2025-031",
            "title": "Early mobilisation after hip fracture surgery",
        },
        "requester": {
            "name": "Dr. Amara Okafor",
            "email": "a.okafor@northbridge-general.example",
            "department": "Orthopaedics",
        },
        "deadline": "2025-09-30",
        "notes": "Primary outcome: 6-minute walk distance at 12 weeks.",
        "question": copy.deepcopy(question if question is not None else question_body()),
    }
    body.update(overrides)
    return body


class Api:
    """Small helpers over the test client so tests read as API calls."""

    question_body = staticmethod(question_body)
    request_body = staticmethod(request_body)

    def __init__(self, client: FlaskClient, app, tokens: Tokens):
        self.client = client
        self.app = app
        self.tokens = tokens

    def submit(
        self,
        body: dict | None = None,
        *,
        key: str | None = None,
        role: str = "intake",
        name: str = "a.okafor",
    ):
        """POST /v1/requests with the token of ``role`` held by ``name``."""
        headers = self.tokens.headers(role, name)
        if key is not None:
            headers["Idempotency-Key"] = key
        return self.client.post("/v1/requests", json=body or request_body(), headers=headers)

    def post(
        self,
        path: str,
        body: dict | None = None,
        *,
        role: str = "statistician",
        name: str = "j.moreau",
    ):
        """POST a JSON body (or none) with the token of ``role`` held by ``name``."""
        headers = self.tokens.headers(role, name)
        if body is None:
            return self.client.post(path, headers=headers)
        return self.client.post(path, json=body, headers=headers)

    def sessions(self):
        """The application's sessionmaker (to arrange states the API cannot reach)."""
        return self.app.extensions["sizewise"]["sessions"]

    def compute_as_worker(self, request_id: str, owner: str = "worker-test") -> None:
        """Claim the request and store the engine's record for it, as a worker would."""
        from service.engine import compute
        from service.store import jobs

        with session_scope(self.sessions()) as s:
            assert jobs.claim(s, "request", request_id, owner, 60, 3)
        with session_scope(self.sessions()) as s:
            record = compute(s.get(Request, request_id).question)
            assert jobs.finish_request(s, request_id, owner, record)


@pytest.fixture
def api(client, app, tokens) -> Api:
    """API helpers bound to the test client."""
    return Api(client, app, tokens)
