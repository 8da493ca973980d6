"""A pooled PostgreSQL connection is pinged only after sitting idle (service.store.db).

Real server: the connection's backend is terminated from another session, as a server restart
or an idle-connection reaper would, and the next checkout must hand out a working connection.
"""

from __future__ import annotations

import pytest
from sqlalchemy import create_engine, text

from service.store.db import ping_when_idle
from tests.conftest import PG_ADMIN_DSN

pytestmark = pytest.mark.services


@pytest.fixture
def pg_url(database_url):
    if not database_url.startswith("postgresql"):
        pytest.skip("the ping is for server databases")
    return database_url


def _backend_pid(engine) -> int:
    with engine.connect() as conn:
        return conn.execute(text("SELECT pg_backend_pid()")).scalar_one()


def _terminate(pid: int) -> None:
    import psycopg

    with psycopg.connect(PG_ADMIN_DSN, autocommit=True) as admin:
        admin.execute("SELECT pg_terminate_backend(%s)", (pid,))


def test_an_idle_connection_killed_by_the_server_is_replaced_before_use(pg_url):
    engine = create_engine(pg_url)
    ping_when_idle(engine, idle_seconds=0)  # every checkout counts as idle
    try:
        dead = _backend_pid(engine)
        _terminate(dead)
        # The ping finds the dead connection at checkout and the pool connects afresh.
        assert _backend_pid(engine) != dead
    finally:
        engine.dispose()


def test_a_connection_just_used_is_reused_without_a_ping(pg_url):
    engine = create_engine(pg_url)
    ping_when_idle(engine, idle_seconds=3600)  # no checkout below counts as idle
    pings = []
    real_ping = engine.dialect.do_ping
    engine.dialect.do_ping = lambda dbapi_connection: pings.append(1) or real_ping(dbapi_connection)
    try:
        first = _backend_pid(engine)
        assert _backend_pid(engine) == first
        assert pings == []  # checked in a moment ago: no round trip before the query
    finally:
        engine.dispose()
