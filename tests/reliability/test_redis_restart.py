"""The broker dies and comes back empty while requests are being submitted: nothing accepted is lost.

The test runs its own ``redis-server`` on a free loopback port (never the machine's shared one),
keeping nothing on disk, so a restart loses every queued message. The API and a real worker point
at it. Each submission must answer within a generous bound even while Redis is down (bounded
publish retries), every 202 must be a stored request, and every one must end ``computed``: the
sweeper publishes what the API could not. Two further checks: a message Redis held when it
restarted is sent again by the sweeper, and the rate limiter keeps answering when its counters
share the dead Redis.
"""

from __future__ import annotations

import shutil
import subprocess
import time
from pathlib import Path

import pytest
from sqlalchemy import select
from workers_testkit import PROTOCOL, REQUESTER

from service import create_app
from service.api.auth import local_client
from service.config import load_config
from service.store.db import session_scope
from service.store.models import Request, Result
from tests.reliability.helpers import free_port, wait_for
from workers.tasks import sessions

pytestmark = [pytest.mark.services, pytest.mark.slow]

# A correctness bound (the API must not hang on a dead broker), not a speed test.
ANSWER_BOUND_SECONDS = 15.0


class RedisServer:
    """A private, diskless redis-server subprocess on one loopback port."""

    def __init__(self, port: int, folder: Path):
        self.port = port
        self.folder = folder
        self.proc: subprocess.Popen | None = None

    @property
    def url(self) -> str:
        """The broker URL of this server."""
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self) -> RedisServer:
        """Start the server and wait until it answers PING."""
        import redis

        binary = shutil.which("redis-server")
        assert binary, "redis-server is not installed"
        self.proc = subprocess.Popen(
            [
                binary,
                "--port",
                str(self.port),
                "--bind",
                "127.0.0.1",
                "--save",
                "",
                "--appendonly",
                "no",
                "--daemonize",
                "no",
                "--dir",
                str(self.folder),
            ],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        client = redis.Redis.from_url(self.url, socket_connect_timeout=1)
        try:
            wait_for(lambda: self._pings(client), 15, f"redis-server on port {self.port}")
        finally:
            client.close()
        return self

    @staticmethod
    def _pings(client) -> bool:
        try:
            return bool(client.ping())
        except Exception:
            return False

    def kill(self) -> None:
        """SIGKILL the server (its queued messages are gone with it)."""
        if self.proc is not None and self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(10)
        self.proc = None


@pytest.fixture
def private_redis(tmp_path: Path):
    server = RedisServer(free_port(), tmp_path)
    try:
        yield server.start()
    finally:
        server.kill()


def _config(pg_url: str, broker_url: str, **overrides) -> dict:
    return load_config(
        {
            "DATABASE_URL": pg_url,
            "BROKER_URL": broker_url,
            "LEASE_SECONDS": 5,
            "SWEEP_SECONDS": 1,
            "MAX_ATTEMPTS": 5,
            **overrides,
        }
    )


@pytest.fixture
def config(pg_url: str, redis_url: str, private_redis: RedisServer) -> dict:
    """The broker is the private Redis; rate-limit counters stay on the shared one (see below)."""
    return _config(pg_url, private_redis.url, RATELIMIT_STORAGE_URL=redis_url)


@pytest.fixture
def client(config: dict):
    # Analytic questions would be answered by the API itself; these tests are about the queue.
    app = create_app(dict(config, TESTING=True, ANSWER_AT_SUBMISSION=False))
    try:
        yield local_client(app, "statistician", "research-office")
    finally:
        app.extensions["sizewise"]["engine"].dispose()


def _question(n: int) -> dict:
    """Analytic power, continuous outcome, two groups of n (quick: the test is about the queue)."""
    return {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"per_group": [n, n]},
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
    }


def _submit(client, n: int) -> str:
    started = time.monotonic()
    reply = client.post(
        "/v1/requests",
        json={"protocol": PROTOCOL, "requester": REQUESTER, "question": _question(n)},
    )
    elapsed = time.monotonic() - started
    assert elapsed < ANSWER_BOUND_SECONDS, f"submission took {elapsed:.1f} s with the broker down"
    assert reply.status_code == 202, reply.get_json()
    return reply.get_json()["id"]


def _all_computed(config: dict, ids: list[str]) -> bool:
    with session_scope(sessions(config)) as session:
        statuses = session.execute(
            select(Request.id, Request.status).where(Request.id.in_(ids))
        ).all()
    return len(statuses) == len(ids) and all(s == "computed" for _, s in statuses)


def _statuses(config: dict, ids: list[str]) -> str:
    with session_scope(sessions(config)) as session:
        rows = session.execute(
            select(Request.id, Request.status, Request.published_at, Request.attempts).where(
                Request.id.in_(ids)
            )
        ).all()
    return "\n".join(
        f"{r.id} {r.status} published={r.published_at} attempts={r.attempts}" for r in rows
    )


def _assert_one_result_each(config: dict, ids: list[str]) -> None:
    with session_scope(sessions(config)) as session:
        rows = session.scalars(select(Result.request_id).where(Result.request_id.in_(ids))).all()
    assert sorted(rows) == sorted(ids)


def test_requests_submitted_across_a_redis_restart_all_complete(
    config, client, private_redis, start_worker
):
    worker = start_worker(config, concurrency=2)
    accepted = [_submit(client, 20 + i) for i in range(4)]
    # Let these be consumed first: a message still queued when Redis dies is the case of
    # the next test.
    wait_for(lambda: _all_computed(config, accepted), 60, "the first requests")
    private_redis.kill()
    # Broker down: the API still stores and accepts; the publish fails quickly and is left
    # for the sweeper.
    down = [_submit(client, 40 + i) for i in range(4)]
    with session_scope(sessions(config)) as session:
        unpublished = session.scalars(
            select(Request.id).where(Request.id.in_(down), Request.published_at.is_(None))
        ).all()
    assert sorted(unpublished) == sorted(down)
    private_redis.start()
    accepted += down + [_submit(client, 60 + i) for i in range(4)]
    wait_for(
        lambda: _all_computed(config, accepted),
        120,
        "every accepted request",
        0.5,
        detail=lambda: f"{_statuses(config, accepted)}\n{worker.tail()}",
    )
    _assert_one_result_each(config, accepted)
    assert worker.proc.poll() is None, worker.tail()


def test_queued_messages_lost_in_a_redis_restart_are_published_again(
    config, client, private_redis, start_worker
):
    # No worker yet: the messages sit in Redis, the jobs are marked published, then Redis
    # restarts empty. Only the database still knows about them.
    accepted = [_submit(client, 20 + i) for i in range(3)]
    with session_scope(sessions(config)) as session:
        published = session.scalars(
            select(Request.id).where(Request.id.in_(accepted), Request.published_at.is_not(None))
        ).all()
    assert sorted(published) == sorted(accepted)
    private_redis.kill()
    private_redis.start()
    start_worker(config, concurrency=2)
    wait_for(lambda: _all_computed(config, accepted), 40, "the requests whose messages were lost")
    _assert_one_result_each(config, accepted)


def test_submission_is_accepted_while_the_shared_broker_and_limiter_redis_is_down(
    pg_url, private_redis
):
    # The default deployment: rate-limit counters live on the broker's Redis too.
    app = create_app(
        dict(_config(pg_url, private_redis.url), TESTING=True, ANSWER_AT_SUBMISSION=False)
    )
    try:
        client = local_client(app, "statistician", "research-office")
        _submit(client, 30)
        private_redis.kill()
        _submit(client, 31)
    finally:
        app.extensions["sizewise"]["engine"].dispose()
