"""The embedded default's API processes share one rate-limit count.

The embedded default runs the API as several gunicorn worker processes without Redis; counters in
each process's memory let a caller make the configured rate once per process. This starts the
real API command (``run_local.API_COMMAND``, 2 workers) on a temporary var/ folder and checks
that the configured rate holds across both processes, for a token and for calls without one.
"""

from __future__ import annotations

import json
import os
import re
import signal
import threading
import urllib.error
import urllib.request
from pathlib import Path

from service.run_local import API_COMMAND, local_argv, local_environment
from service.store import tokens as token_store
from service.store.db import make_engine, make_sessionmaker, session_scope
from service.store.migrate import upgrade

from ._procs import free_port, start, stop_group, tail, wait_for

RATE = 12
CALLS = 40


def _get(url: str, headers: dict) -> int:
    req = urllib.request.Request(url, headers=headers)
    try:
        with urllib.request.urlopen(req, timeout=60) as response:
            return response.status
    except urllib.error.HTTPError as exc:
        return exc.code
    except OSError:
        return 0


def _burst(url: str, headers: dict) -> list[int]:
    codes: list[int] = []
    lock = threading.Lock()
    per_thread = CALLS // 8

    def run() -> None:
        for _ in range(per_thread):
            code = _get(url, headers)
            with lock:
                codes.append(code)

    threads = [threading.Thread(target=run) for _ in range(8)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(120)
    return codes


def _pids(log: Path) -> set[str]:
    """The worker processes that answered /v1/catalogue, from the access log's pid column."""
    return set(re.findall(r"^<?(\d+)>? (?:200|401|429) /v1/catalogue$", log.read_text(), re.M))


def test_rate_limit_is_shared_by_the_embedded_api_processes(tmp_path: Path):
    var = tmp_path / "var"
    port = free_port()
    base = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    base.update(
        SIZEWISE_VAR_DIR=str(var), SIZEWISE_PORT=str(port), SIZEWISE_RATE_LIMIT=f"{RATE}/hour"
    )
    env = local_environment(base)
    # The worker's pid in each access-log line shows that both processes answered.
    env["GUNICORN_CMD_ARGS"] += " --access-logformat '%(p)s %(s)s %(U)s'"
    url = env["SIZEWISE_DATABASE_URL"]
    var.mkdir(parents=True)
    upgrade(url)
    engine = make_engine(url)
    with session_scope(make_sessionmaker(engine)) as session:
        _id, secret = token_store.create_token(session, "auditor", "rate check")
    engine.dispose()
    assert "--workers" in API_COMMAND and API_COMMAND[API_COMMAND.index("--workers") + 1] == "2"
    log = tmp_path / "api.log"
    proc = start(local_argv(API_COMMAND), env, log)
    try:
        health = f"http://127.0.0.1:{port}/healthz"

        def up() -> bool:
            if proc.poll() is not None:
                raise AssertionError(f"the API exited early:\n{tail(log)}")
            return _get(health, {}) == 200

        wait_for(up, 90, "the API's /healthz", step=0.5)
        catalogue = f"http://127.0.0.1:{port}/v1/catalogue"
        with_token = _burst(catalogue, {"Authorization": f"Bearer {secret}"})
        without = _burst(catalogue, {})
        # The kernel may hand every connection to one process (an idle process wins accept()
        # over and over), so one process that answered is stopped for one more burst: the other
        # one must accept it, and it must refuse as well, the count being past the limit in both.
        stopped = min(_pids(log))
        os.kill(int(stopped), signal.SIGSTOP)
        try:
            extra = _burst(catalogue, {})
        finally:
            os.kill(int(stopped), signal.SIGCONT)
    finally:
        stop_group(proc)
    assert sorted(with_token) == [200] * RATE + [429] * (CALLS - RATE), json.dumps(with_token)
    assert sorted(without) == [401] * RATE + [429] * (CALLS - RATE), json.dumps(without)
    assert extra == [429] * CALLS, json.dumps(extra)
    assert len(_pids(log)) == 2, tail(log)
    # The counters live in the shared file under the var/ folder, created owner-only.
    counters = var / "ratelimit.sqlite"
    assert counters.exists() and (counters.stat().st_mode & 0o077) == 0
