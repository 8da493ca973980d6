"""One SQLAlchemy sessionmaker per worker process and database URL (no other worker imports)."""

from __future__ import annotations

import os
import threading
from typing import Any

from celery.signals import worker_process_init
from sqlalchemy.orm import sessionmaker

from service.store.db import make_engine, make_sessionmaker

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


@worker_process_init.connect
def _forget_parent_connections(**_kwargs) -> None:
    """A forked pool process must not reuse the parent's pooled connections."""
    for (_pid, _url), factory in list(_SESSIONS.items()):
        factory.kw["bind"].dispose(close=False)
    _SESSIONS.clear()
