"""End-to-end fixtures: the same real-worker fixtures as tests/workers (see workers_testkit),
and ``live_service``: the embedded default as `make run` starts it, reached over HTTP."""

import os
import sys
from pathlib import Path
from urllib.request import urlopen

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workers"))

from workers_testkit import (  # noqa: E402,F401
    embedded_config,
    pg_redis_config,
    pg_url,
    redis_url,
    start_worker,
)

# Who holds a token on the live service (invented Northbridge General Hospital staff). The
# research office's form submits; a statistician of another name reviews (four eyes).
PEOPLE = {
    "intake": ("intake", "research-office form"),
    "statistician": ("statistician", "j.moreau"),
    "auditor": ("auditor", "k.ito"),
    "admin": ("admin", "it-admin"),
}


@pytest.fixture(scope="session")
def live_service(tmp_path_factory):
    """The embedded default over HTTP: the API under gunicorn and one real Celery worker, the
    commands `make run` starts, on a SQLite file and a folder broker in a temporary var/.

    Yields ``{"url", "secrets", "var", "api_log", "worker_log"}``; both processes are stopped
    at the end of the session.
    """
    from service.config import ensure_broker_folders, load_config
    from service.run_local import API_COMMAND, WORKER_COMMAND, local_argv, local_environment
    from service.store import tokens as token_store
    from service.store.db import make_engine, make_sessionmaker, session_scope
    from service.store.migrate import upgrade
    from tests.ops._procs import free_port, start, stop_group, tail, wait_for

    root = tmp_path_factory.mktemp("live")
    var = root / "var"
    var.mkdir(mode=0o700)
    port = free_port()
    base = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    base.update(
        SIZEWISE_VAR_DIR=str(var),
        SIZEWISE_PORT=str(port),
        # The fuzzer sends hundreds of calls with one token; 429 is not what it checks.
        SIZEWISE_RATE_LIMIT="100000/minute",
        # Valid simulations the fuzzer posts stay small, so the one worker keeps up.
        SIZEWISE_SIMULATION_BUDGET="2000000",
        SIZEWISE_WORKER_CONCURRENCY="1",
    )
    env = local_environment(base)
    ensure_broker_folders(load_config({"BROKER_URL": env["SIZEWISE_BROKER_URL"]}))
    upgrade(env["SIZEWISE_DATABASE_URL"])
    engine = make_engine(env["SIZEWISE_DATABASE_URL"])
    secrets = {}
    with session_scope(make_sessionmaker(engine)) as session:
        for who, (role, name) in PEOPLE.items():
            secrets[who] = token_store.create_token(session, role, name)[1]
    engine.dispose()
    api_log, worker_log = root / "api.log", root / "worker.log"
    worker = start(local_argv(WORKER_COMMAND), env, worker_log)
    api = start(local_argv(API_COMMAND), env, api_log)
    url = f"http://127.0.0.1:{port}"
    try:

        def up() -> bool:
            for name, proc, log in (("API", api, api_log), ("worker", worker, worker_log)):
                if proc.poll() is not None:
                    raise AssertionError(f"the {name} exited early:\n{tail(log)}")
            try:
                with urlopen(f"{url}/readyz", timeout=2) as reply:
                    return reply.status == 200 and b" ready." in worker_log.read_bytes()
            except OSError:
                return False

        wait_for(up, 120, "the API's /readyz and the worker's ready line", step=0.5)
        yield {
            "url": url,
            "secrets": secrets,
            "var": var,
            "api_log": api_log,
            "worker_log": worker_log,
        }
    finally:
        stop_group(api)
        stop_group(worker)
