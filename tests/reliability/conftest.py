"""Reliability fixtures: the real-worker kit of tests/workers (helpers live in helpers.py).

The process tests run real Celery workers against a fresh PostgreSQL database; the broker is the
machine's Redis (a database number of this session) or, where a test stops the broker, a private
``redis-server`` on a free loopback port. Nothing here stops a shared server.
Demo data is invented (Northbridge General Hospital research office).
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workers"))

from workers_testkit import (  # noqa: E402,F401
    pg_url,
    redis_url,
    sqlite_config,
    start_worker,
)
