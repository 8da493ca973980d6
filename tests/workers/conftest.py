"""Worker test fixtures; they live in workers_testkit so tests/e2e can load the same ones."""

from workers_testkit import (  # noqa: F401
    embedded_config,
    factory,
    pg_redis_config,
    pg_url,
    redis_url,
    sqlite_config,
    start_worker,
)
