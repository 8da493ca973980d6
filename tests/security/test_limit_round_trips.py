"""The rate-limit headers come from the increment itself: one trip to the counter store.

Flask-Limiter asks for the window's count and expiry after its increment (a Redis GET and TTL:
three round trips per request). The storages in ``service.api.counters`` return both with the
increment, so a request makes exactly one Redis command, and the headers stay exact: the count
after this request's own increment, shared by every process (two applications on one store here,
as two gunicorn workers are). Commands are counted on the real Redis server's client connection.
"""

from __future__ import annotations

import time
import uuid

import pytest
import redis.connection

from service.api.counters import RedisWindowStorage, window_storage_url

RATE = 50
REDIS_URL = "redis://127.0.0.1:6379/15"


def _token(app, name: str) -> tuple[str, dict]:
    from service.store import tokens
    from service.store.db import session_scope

    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        token_id, secret = tokens.create_token(session, "statistician", name)
    return token_id, {"Authorization": f"Bearer {secret}"}


@pytest.fixture
def redis_commands(monkeypatch):
    """Every command any Redis connection of this process sends, as (name, key) pairs."""
    sent: list[tuple[str, str]] = []
    original = redis.connection.Connection.send_command

    def counting(self, *args, **kwargs):
        sent.append((str(args[0]).upper(), " ".join(str(a) for a in args[1:3])))
        return original(self, *args, **kwargs)

    monkeypatch.setattr(redis.connection.Connection, "send_command", counting)
    return sent


def test_redis_urls_go_to_the_counting_storage():
    assert window_storage_url("redis://127.0.0.1:6379/0") == "sizewise+redis://127.0.0.1:6379/0"
    assert window_storage_url("rediss://h:6380/1") == "sizewise+rediss://h:6380/1"
    for other in ("memory://", "sizewise+sqlite:///tmp/x.sqlite", "redis+unix:///tmp/r.sock"):
        assert window_storage_url(other) == other


@pytest.mark.services
def test_one_redis_command_per_request_and_exact_shared_headers(make_app, redis_commands):
    # Two applications on one Redis: two API processes sharing the count.
    first = make_app(RATELIMIT_STORAGE_URL=REDIS_URL, RATE_LIMIT=f"{RATE} per hour")
    second = make_app(RATELIMIT_STORAGE_URL=REDIS_URL, RATE_LIMIT=f"{RATE} per hour")
    token_id, headers = _token(first, "r.counter")
    question = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
    }
    clients = [first.test_client(), second.test_client()]
    # The token cache and the limiter's Lua script are loaded by a first call on each app.
    for client in clients:
        assert client.get("/v1/catalogue", headers=headers).status_code == 200
    remaining = []
    resets = []
    for i in range(6):
        redis_commands.clear()
        client = clients[i % 2]
        started = time.time()
        r = client.post("/v1/calculations", json={"question": question}, headers=headers)
        assert r.status_code == 200, r.get_json()
        # One command: the increment that also returns the window's TTL (no GET, no TTL).
        assert [name for name, _ in redis_commands] == ["EVALSHA"], redis_commands
        assert r.headers["X-RateLimit-Limit"] == str(RATE)
        remaining.append(int(r.headers["X-RateLimit-Remaining"]))
        resets.append(int(r.headers["X-RateLimit-Reset"]))
        # The window is an hour from its first call: the reset lies within it.
        assert started < resets[-1] <= started + 3600 + 2
    # Exact and shared: each call (on either application) leaves one fewer, counted from the
    # two catalogue calls before.
    assert remaining == [RATE - 3 - i for i in range(6)]
    # One window: every answer names the same reset (to the second).
    assert max(resets) - min(resets) <= 1
    # The server's own count agrees with the last answer's header.
    server = redis.Redis.from_url(REDIS_URL)
    (key,) = server.scan_iter(f"LIMITS:*token:{token_id}*")
    assert RATE - int(server.get(key)) == remaining[-1]


@pytest.mark.services
def test_the_remembered_window_is_read_once_and_forgotten_on_clear():
    storage = RedisWindowStorage(window_storage_url(REDIS_URL))
    key = f"sizewise-test/{uuid.uuid4().hex}"
    try:
        assert storage.incr(key, 60) == 1
        assert storage.incr(key, 60, amount=2) == 3
        # The stats right after an increment: its own count and window end.
        assert storage.get(key) == 3
        assert 58 <= storage.get_expiry(key) - time.time() <= 61
        # Another process adds to the same key; a later read asks Redis again.
        other = RedisWindowStorage(window_storage_url(REDIS_URL))
        assert other.incr(key, 60) == 4
        assert storage.get(key) == 4
        storage.incr(key, 60)
        storage.clear(key)
        assert storage.get(key) == 0
    finally:
        storage.clear(key)
