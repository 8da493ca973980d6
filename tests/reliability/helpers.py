"""Helpers shared by the reliability tests (a module of its own, not conftest, so it imports
under one name whichever test folders a run collects)."""

from __future__ import annotations

import socket
import time


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
