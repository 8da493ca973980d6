"""End-to-end fixtures: the same real-worker fixtures as tests/workers (see workers_testkit)."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workers"))

from workers_testkit import (  # noqa: E402,F401
    embedded_config,
    pg_redis_config,
    pg_url,
    redis_url,
    start_worker,
)
