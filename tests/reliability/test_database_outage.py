"""The database goes away and comes back: 503 problem+json meanwhile, 200 again without a restart.

The test runs its own PostgreSQL instance (``initdb`` into a temporary folder, ``pg_ctl`` on a
free loopback port); the machine's shared cluster is never touched. One Flask application is
created against it and kept for the whole test, so "recovers" means the same process and the
same connection pool answer again once the server is back.
"""

from __future__ import annotations

import glob
import os
import shutil
import subprocess
import tempfile
from pathlib import Path

import pytest

from service import create_app
from service.api.auth import local_client
from service.store.migrate import upgrade
from tests.reliability.helpers import free_port, wait_for

pytestmark = [pytest.mark.services, pytest.mark.slow]

PROBLEM_JSON = "application/problem+json"


def _pg_bin() -> Path:
    """The folder of PostgreSQL's server binaries (initdb, pg_ctl); fail, never skip, when absent."""
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    if not found:
        pytest.fail("initdb not found under /usr/lib/postgresql/*/bin/: the test cannot run")
    return Path(found[-1]).parent


class Postgres:
    """A throwaway PostgreSQL cluster in a temporary folder, run as the 'postgres' OS user."""

    def __init__(self, port: int):
        self.bin = _pg_bin()
        self.port = port
        # Not pytest's tmp_path: the postgres user must be able to reach the folder.
        self.root = Path(tempfile.mkdtemp(prefix="sizewise-pg-", dir="/tmp"))
        self.data = self.root / "data"
        self.log = self.root / "server.log"
        os.chmod(self.root, 0o755)
        if os.geteuid() == 0:
            shutil.chown(self.root, "postgres", "postgres")

    def _run(self, *args: str) -> None:
        command = [str(self.bin / args[0]), *args[1:]]
        if os.geteuid() == 0:  # initdb refuses to run as root
            command = ["runuser", "-u", "postgres", "--", *command]
        done = subprocess.run(command, capture_output=True, text=True, timeout=120)
        assert done.returncode == 0, f"{' '.join(command)}:\n{done.stdout}\n{done.stderr}"

    def init(self) -> Postgres:
        """Create the cluster (trust auth, fsync off: it is thrown away)."""
        self._run("initdb", "-D", str(self.data), "-A", "trust", "-U", "postgres", "--no-sync")
        return self

    def start(self) -> None:
        """Start the server on 127.0.0.1:port and wait until it accepts connections."""
        options = f"-p {self.port} -k {self.data} -c listen_addresses=127.0.0.1 -c fsync=off"
        self._run("pg_ctl", "-D", str(self.data), "-l", str(self.log), "-o", options, "-w", "start")

    def stop(self, mode: str = "fast") -> None:
        """Stop the server (fast: disconnect every session)."""
        self._run("pg_ctl", "-D", str(self.data), "-m", mode, "-w", "stop")

    def url(self, database: str) -> str:
        """SQLAlchemy URL of ``database`` on this server."""
        return f"postgresql+psycopg://postgres@127.0.0.1:{self.port}/{database}"

    def cleanup(self) -> None:
        """Stop the server if it runs and delete its folder."""
        if (self.data / "postmaster.pid").exists():
            try:
                self.stop("immediate")
            except AssertionError:
                pass
        shutil.rmtree(self.root, ignore_errors=True)


@pytest.fixture
def postgres():
    server = Postgres(free_port())
    try:
        server.init().start()
        yield server
    finally:
        server.cleanup()


def _assert_unavailable(reply) -> None:
    assert reply.status_code == 503, reply.get_data(as_text=True)
    assert reply.mimetype == PROBLEM_JSON
    body = reply.get_json()
    assert body["status"] == 503 and body["title"] and body["detail"]
    assert "Traceback" not in reply.get_data(as_text=True)


def test_api_answers_503_while_the_database_is_down_and_recovers_by_itself(postgres, tmp_path):
    import psycopg

    with psycopg.connect(
        f"host=127.0.0.1 port={postgres.port} user=postgres dbname=postgres", autocommit=True
    ) as conn:
        conn.execute('CREATE DATABASE "sizewise"')
    url = postgres.url("sizewise")
    upgrade(url)
    app = create_app(
        {"DATABASE_URL": url, "BROKER_URL": f"filesystem://{tmp_path / 'broker'}", "TESTING": True}
    )
    try:
        client = local_client(app, "statistician", "research-office")
        assert client.get("/readyz").status_code == 200
        assert client.get("/v1/requests").status_code == 200

        postgres.stop("fast")
        reply = client.get("/readyz")
        _assert_unavailable(reply)
        assert reply.get_json()["checks"]["database"] != "ok"
        _assert_unavailable(client.get("/v1/requests"))

        postgres.start()
        # The same application instance: its pool drops the dead connections and reconnects.
        wait_for(lambda: client.get("/readyz").status_code == 200, 30, "/readyz to recover")
        reply = client.get("/v1/requests")
        assert reply.status_code == 200, reply.get_data(as_text=True)
    finally:
        app.extensions["sizewise"]["engine"].dispose()
