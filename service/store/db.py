"""Engine and session factories; the session lifecycle lives here, never in data functions."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker


def _sqlite_pragmas(dbapi_connection, _record) -> None:
    cursor = dbapi_connection.cursor()
    # WAL lets the API read while a worker writes; busy_timeout waits instead of failing at once.
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute("PRAGMA busy_timeout=5000")
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.close()


def make_engine(url: str) -> Engine:
    """Create an Engine for ``url``: SQLite with WAL and busy_timeout, PostgreSQL with pre-ping."""
    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        engine = create_engine(url)
        event.listen(engine, "connect", _sqlite_pragmas)
        return engine
    connect_args = {}
    if parsed.get_backend_name() == "postgresql":
        # A dead or firewalled server must not hang a request (or /readyz) for minutes.
        connect_args["connect_timeout"] = 3
    return create_engine(url, pool_pre_ping=True, connect_args=connect_args)


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
