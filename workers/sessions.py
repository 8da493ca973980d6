"""One SQLAlchemy sessionmaker per worker process and database URL (no other worker imports)."""

from __future__ import annotations

import logging
import os
import threading
from typing import Any

from celery.signals import worker_init, worker_process_init
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import sessionmaker

from service.store.db import make_engine, make_sessionmaker

log = logging.getLogger(__name__)

_SESSIONS: dict[tuple[int, str], Any] = {}
_SESSIONS_LOCK = threading.Lock()


def sessions(config: dict) -> sessionmaker:
    """Return this process's sessionmaker for the config's database (one per process and URL)."""
    key = (os.getpid(), str(config["DATABASE_URL"]))
    with _SESSIONS_LOCK:
        factory = _SESSIONS.get(key)
        if factory is None:
            factory = make_sessionmaker(make_engine(key[1]))
            _SESSIONS[key] = factory
    return factory


@worker_init.connect
def _load_database_driver(sender=None, **_kwargs) -> None:
    """Load the database dialect and driver in the worker's main process, before the pool forks.

    Creating the first engine imports them (about 0.2 s for PostgreSQL): done here, no pool
    child pays it on its first task (a helper's first unit waited that long). No connection is
    opened; each child makes its own engine and connections (:func:`sessions`).
    """
    conf = getattr(getattr(sender, "app", None), "conf", None)
    url = (conf.get("sizewise") or {}).get("DATABASE_URL") if conf is not None else None
    if url:
        make_engine(str(url)).dispose()


@worker_process_init.connect
def _forget_parent_connections(**_kwargs) -> None:
    """A forked pool process must not reuse the parent's pooled connections; it opens its own
    first connection now, not inside its first task (a helper's first unit waited for it)."""
    for (_pid, _url), factory in list(_SESSIONS.items()):
        factory.kw["bind"].dispose(close=False)
    _SESSIONS.clear()
    from celery import current_app

    config = current_app.conf.get("sizewise") or {}
    if config.get("DATABASE_URL"):
        try:
            sessions(config).kw["bind"].connect().close()  # back to this process's pool
        except SQLAlchemyError as exc:  # the database is down: the first task finds out
            log.warning("pool process could not connect to the database yet: %s", exc)
