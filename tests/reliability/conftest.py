"""Reliability fixtures: the real-worker kit of tests/workers plus helpers shared by these tests.

The process tests run real Celery workers against a fresh PostgreSQL database; the broker is the
machine's Redis (a database number of this session) or, where a test stops the broker, a private
``redis-server`` on a free loopback port. Nothing here stops a shared server.
Demo data is invented (Northbridge General Hospital research office).
"""

from __future__ import annotations

import socket
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workers"))

from workers_testkit import (  # noqa: E402,F401
    pg_url,
    redis_url,
    start_worker,
)


def free_port() -> int:
    """Return a TCP port on 127.0.0.1 that nothing listens on right now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def wait_for(predicate, timeout: float, what: str, interval: float = 0.1, detail=None):
    """Poll ``predicate`` until it returns a truthy value (returned) or fail after ``timeout``.

    ``detail()``, when given, adds context (statuses, a worker's log) to the failure message.
    """
    deadline = time.monotonic() + timeout
    while True:
        value = predicate()
        if value:
            return value
        if time.monotonic() > deadline:
            extra = f"\n{detail()}" if detail is not None else ""
            raise AssertionError(f"timed out after {timeout} s waiting for {what}{extra}")
        time.sleep(interval)
