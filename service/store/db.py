"""Engine and session factories; the session lifecycle lives here, never in data functions."""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

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


def make_engine(url: str) -> Engine:
    """Create an Engine for ``url``: SQLite with WAL and busy_timeout, PostgreSQL with pre-ping."""
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
