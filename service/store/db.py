"""Engine and session factories; the session lifecycle lives here, never in data functions."""

from __future__ import annotations

import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.exc import DisconnectionError
from sqlalchemy.orm import Session, sessionmaker


def _sqlite_pragmas(dbapi_connection, _record) -> None:
    cursor = dbapi_connection.cursor()
    # WAL lets the API read while a worker writes; busy_timeout waits instead of failing at once.
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute("PRAGMA busy_timeout=5000")
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.close()


# The database holds questions, results and token hashes: readable by the service's user only.
PRIVATE_FILE_MODE = 0o600


def private_sqlite_file(database: str | None) -> None:
    """Create the SQLite file owner-only (0600) before SQLite does, and tighten an existing one.

    SQLite gives its -wal and -shm files the database file's mode, so they follow.
    """
    if not database or database == ":memory:" or database.startswith("file:"):
        return
    path = Path(database)
    if not path.parent.is_dir():
        return  # SQLite will say the folder is missing
    try:
        os.close(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, PRIVATE_FILE_MODE))
    except FileExistsError:
        pass
    for name in (path, Path(f"{path}-wal"), Path(f"{path}-shm"), Path(f"{path}-journal")):
        try:
            if name.stat().st_mode & 0o077:
                os.chmod(name, PRIVATE_FILE_MODE)
        except FileNotFoundError:
            pass


# A pooled server connection back in the pool for less than this is used without a ping first.
PING_AFTER_IDLE_SECONDS = 1.0


def ping_when_idle(engine: Engine, idle_seconds: float = PING_AFTER_IDLE_SECONDS) -> None:
    """Ping a pooled connection at checkout only when it sat idle ``idle_seconds`` or more.

    SQLAlchemy's pool_pre_ping pings at every checkout: a round trip and about 0.2 ms of CPU on
    each API call, a tenth of a poll of a running request. A connection used within the last
    second is alive unless the server restarted in that second; then the first statement on it
    fails, SQLAlchemy sees the disconnect and drops the pool's connections, and the next call
    connects afresh. A dead connection found by the ping is replaced before use (the pool
    retries the checkout on DisconnectionError).
    """

    @event.listens_for(engine, "checkin")
    def _checked_in(_dbapi_connection, record) -> None:
        if record is not None:
            record.info["checked_in"] = time.monotonic()

    @event.listens_for(engine, "checkout")
    def _checked_out(dbapi_connection, record, _proxy) -> None:
        # A new connection (or one invalidated and reconnected) has an empty info: just made.
        since = record.info.get("checked_in")
        if since is None or time.monotonic() - since < idle_seconds:
            return
        try:
            engine.dialect.do_ping(dbapi_connection)
        except Exception as exc:
            raise DisconnectionError("the pooled connection did not answer a ping") from exc


def make_engine(url: str) -> Engine:
    """Create an Engine for ``url``: SQLite with WAL and busy_timeout, PostgreSQL pinged when idle."""
    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        private_sqlite_file(parsed.database)
        engine = create_engine(url)
        event.listen(engine, "connect", _sqlite_pragmas)
        return engine
    connect_args = {}
    if parsed.get_backend_name() == "postgresql":
        # A dead or firewalled server must not hang a request (or /readyz) for minutes.
        connect_args["connect_timeout"] = 3
    engine = create_engine(url, connect_args=connect_args)
    ping_when_idle(engine)
    return engine


def make_sessionmaker(engine: Engine) -> sessionmaker[Session]:
    """Return the one sessionmaker of a process, bound to ``engine``."""
    return sessionmaker(bind=engine, expire_on_commit=False)


@contextmanager
def session_scope(factory: sessionmaker[Session]) -> Iterator[Session]:
    """Yield a session that commits on success and rolls back on any exception."""
    session = factory()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()
