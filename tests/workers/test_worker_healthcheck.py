"""docker-compose.yml's worker health check, run as written against a real worker on Redis:
it passes while the worker runs and fails once it is gone."""

from __future__ import annotations

import os
import socket
import subprocess
from pathlib import Path

import pytest
import yaml
from workers_testkit import REPO, WorkerProcess

from service.run_local import WORKER_COMMAND, local_argv

pytestmark = [pytest.mark.services, pytest.mark.slow]


def _healthcheck_command() -> str:
    compose = yaml.safe_load((REPO / "docker-compose.yml").read_text())
    test = compose["services"]["worker"]["healthcheck"]["test"]
    assert test[0] == "CMD-SHELL"
    return test[1].replace("$$", "$")  # compose's escape, undone as compose does


class ComposeWorker(WorkerProcess):
    """The worker exactly as compose starts it (WORKER_COMMAND: the default node name)."""

    def argv(self) -> list[str]:
        return local_argv(WORKER_COMMAND)


def _ping(config: dict) -> subprocess.CompletedProcess:
    env = dict(os.environ, HOSTNAME=socket.gethostname(), PYTHONPATH=str(REPO))
    env["SIZEWISE_BROKER_URL"] = str(config["BROKER_URL"])
    env["PATH"] = f"{Path(local_argv(['python'])[0]).parent}:{env['PATH']}"
    return subprocess.run(
        ["bash", "-c", _healthcheck_command()],
        cwd=REPO,
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
    )


def test_the_compose_health_check_pings_the_running_worker(pg_redis_config, tmp_path):
    worker = ComposeWorker(pg_redis_config, tmp_path / "worker.log", concurrency=1)
    try:
        worker.start()
        alive = _ping(pg_redis_config)
        assert alive.returncode == 0, alive.stdout + alive.stderr + worker.tail()
        assert "pong" in alive.stdout
    finally:
        worker.stop()
    gone = _ping(pg_redis_config)
    assert gone.returncode != 0, gone.stdout
