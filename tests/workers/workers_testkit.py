"""Fixtures and helpers for the worker and end-to-end tests (loaded by both conftest files).

SQLite for unit tests, real PostgreSQL/Redis/Celery for the rest.

Unit tests call the plain task functions against a migrated SQLite file. Integration tests use
:class:`WorkerProcess`, a real ``celery -A workers.celery_app worker`` subprocess pointed at a
fresh PostgreSQL database and a Redis database number of this session (or, for the embedded
default, at a SQLite file and a filesystem:// broker in a temporary folder). Every worker
started here is stopped at teardown: SIGTERM to its process group, then SIGKILL.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

from service.api.auth import local_client
from service.config import load_config
from service.engine import canonical_json
from service.schemas.question import load_question
from service.store.db import session_scope
from service.store.migrate import upgrade
from service.store.models import Request
from service.store.requests import design_key

REPO = Path(__file__).resolve().parents[2]
CELERY = Path(sys.executable).with_name("celery")
PG_ADMIN_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"


def two_groups_question(
    *,
    method: str = "analytic",
    replicates: int = 4000,
    chunk_size: int = 500,
    seed: int = 20240611,
    per_group: int = 30,
    find: str = "power",
) -> dict:
    """A normalized question: continuous outcome, two groups, d = 0.5 (SD 1), pooled t test.

    Posted in the question vocabulary and normalized by the schema, as the API does.
    """
    raw: dict = {
        "outcome": "continuous",
        "layout": "two_groups",
        "analysis": "pooled_t",
        "find": find,
        "alpha": 0.05,
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "method": method,
    }
    if find == "power":
        raw["sample_size"] = {"per_group": [per_group, per_group]}
    else:
        raw["target_power"] = 0.80
    if method == "simulation":
        raw["simulation"] = {
            "replicates": replicates,
            "seed": seed,
            "chunk_size": chunk_size,
            "search_replicates": min(2000, replicates),
        }
    return load_question(raw)


def insert_request(factory, question: dict, *, status: str = "queued") -> str:
    """Store a request row as the API would (Northbridge General Hospital demo data)."""
    request_id = uuid.uuid4().hex
    with session_scope(factory) as session:
        session.add(
            Request(
                id=request_id,
                status=status,
                protocol={"id": "NGH-2024-017", "title": "Early mobilisation after hip surgery"},
                protocol_id="NGH-2024-017",
                requester={"name": "Dr. Ana Quill", "email": "a.quill@northbridge.example"},
                requester_name="Dr. Ana Quill",
                requester_email="a.quill@northbridge.example",
                department="Orthopaedics",
                question_raw=question,
                question=question,
                design=design_key(question),
                method=question["method"],
                seed=(question.get("simulation") or {}).get("seed"),
                progress=0.0,
                cancel_requested=False,
                body_sha256="0" * 64,
                submitted_by="research-office",
            )
        )
    return request_id


@pytest.fixture
def sqlite_config(tmp_path: Path) -> dict:
    """A config for a fresh, migrated SQLite file and a filesystem broker under tmp_path."""
    url = f"sqlite:///{tmp_path / 'sizewise.db'}"
    upgrade(url)
    config = load_config(
        {
            "DATABASE_URL": url,
            "BROKER_URL": f"filesystem://{tmp_path / 'broker'}",
            "LEASE_SECONDS": 30,
            "MAX_ATTEMPTS": 3,
        }
    )
    return config


@pytest.fixture
def factory(sqlite_config: dict):
    """The worker process's sessionmaker for the SQLite config."""
    from workers.tasks import sessions

    return sessions(sqlite_config)


# --- real services -----------------------------------------------------------------------------


def _services_skipped() -> bool:
    return os.environ.get("SIZEWISE_SKIP_SERVICES") == "1"


@pytest.fixture(scope="session")
def redis_url() -> Iterator[str]:
    """A Redis database number for this session (flushed at start and end)."""
    if _services_skipped():
        pytest.skip("SIZEWISE_SKIP_SERVICES=1")
    import redis

    number = 1 + os.getpid() % 15  # other sessions on the shared machine use other numbers
    url = f"redis://127.0.0.1:6379/{number}"
    client = redis.Redis.from_url(url, socket_connect_timeout=3)
    client.flushdb()
    yield url
    client.flushdb()
    client.close()


@pytest.fixture(scope="session")
def pg_url() -> Iterator[str]:
    """A fresh PostgreSQL database migrated with Alembic; dropped at the end of the session."""
    if _services_skipped():
        pytest.skip("SIZEWISE_SKIP_SERVICES=1")
    from sqlalchemy import create_engine, text

    name = f"sizewise_workers_{uuid.uuid4().hex[:10]}"
    admin = create_engine(PG_ADMIN_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    url = f"postgresql+psycopg://postgres@127.0.0.1:5432/{name}"
    try:
        upgrade(url)
        yield url
    finally:
        from workers.sessions import _SESSIONS

        for factory in list(_SESSIONS.values()):
            factory.kw["bind"].dispose()
        _SESSIONS.clear()
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


class WorkerProcess:
    """A real Celery worker subprocess with SIZEWISE_* variables pointing at the test services."""

    def __init__(self, config: dict, log_path: Path, *, concurrency: int = 2):
        self.config = config
        self.log_path = log_path
        self.concurrency = concurrency
        self.proc: subprocess.Popen | None = None

    def env(self) -> dict[str, str]:
        """The environment of the worker: the test config as SIZEWISE_* variables."""
        env = dict(os.environ)
        for key in (
            "DATABASE_URL",
            "BROKER_URL",
            "LEASE_SECONDS",
            "MAX_ATTEMPTS",
            "SWEEP_SECONDS",
            "SIMULATION_BUDGET",
        ):
            env[f"SIZEWISE_{key}"] = str(self.config[key])
        for key in ("FANOUT_HELPERS", "FANOUT_SPLIT_SECONDS", "ANSWER_AT_SUBMISSION"):
            if key in self.config:
                env[f"SIZEWISE_{key}"] = str(self.config[key])
        env["SIZEWISE_WORKER_CONCURRENCY"] = str(self.concurrency)
        env["PYTHONPATH"] = str(REPO)
        return env

    def argv(self) -> list[str]:
        """The worker's command line: a node name of its own, both queues, a prefork pool."""
        node = f"w{uuid.uuid4().hex[:6]}@%h"
        return [
            str(CELERY),
            "-A",
            "workers.celery_app",
            "worker",
            "--pool",
            "prefork",
            "--concurrency",
            str(self.concurrency),
            "-Q",
            "sizewise,sizewise.helpers",
            "--without-mingle",
            "--without-gossip",
            "--without-heartbeat",
            "--loglevel",
            "INFO",
            "-n",
            node,
        ]

    def start(self, timeout: float = 60.0) -> WorkerProcess:
        """Start the worker and wait until it logs that it is ready."""
        self.log = open(self.log_path, "ab")  # noqa: SIM115 - closed in stop()
        self.proc = subprocess.Popen(
            self.argv(),
            cwd=REPO,
            env=self.env(),
            stdout=self.log,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"celery worker exited early:\n{self.tail()}")
            if b" ready." in self.log_path.read_bytes():
                return self
            time.sleep(0.2)
        self.stop()
        raise RuntimeError(f"celery worker not ready after {timeout} s:\n{self.tail()}")

    def tail(self, lines: int = 60) -> str:
        """The last lines of the worker's log (for failure messages)."""
        text = self.log_path.read_text(errors="replace") if self.log_path.exists() else ""
        return "\n".join(text.splitlines()[-lines:])

    def kill(self) -> None:
        """SIGKILL the worker and its pool at once, as a crashed machine would leave them."""
        if self.proc is not None and self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
        self.stop()

    def stop(self, grace: float = 20.0) -> None:
        """SIGTERM the worker's process group, then SIGKILL whatever is left."""
        if self.proc is None:
            return
        if self.proc.poll() is None:
            try:
                os.killpg(self.proc.pid, signal.SIGTERM)
                self.proc.wait(grace)
            except subprocess.TimeoutExpired:
                pass
            except ProcessLookupError:
                pass
        try:
            os.killpg(self.proc.pid, signal.SIGKILL)  # pool children, if any survived
        except ProcessLookupError:
            pass
        if self.proc.poll() is None:
            self.proc.wait(5)
        self.log.close()
        self.proc = None


@pytest.fixture
def start_worker(tmp_path: Path):
    """Start real Celery workers for a config; every one is stopped at teardown."""
    started: list[WorkerProcess] = []

    def start(config: dict, *, concurrency: int = 2) -> WorkerProcess:
        worker = WorkerProcess(
            config, tmp_path / f"worker{len(started)}.log", concurrency=concurrency
        )
        started.append(worker)
        return worker.start()

    yield start
    for worker in started:
        worker.stop()


@pytest.fixture
def pg_redis_config(pg_url: str, redis_url: str) -> dict:
    """The config of the real-services stack: PostgreSQL, Redis, short leases and sweeps."""
    return load_config(
        {
            "DATABASE_URL": pg_url,
            "BROKER_URL": redis_url,
            "LEASE_SECONDS": 15,
            "MAX_ATTEMPTS": 3,
            "SWEEP_SECONDS": 2,
        }
    )


@pytest.fixture
def embedded_config(tmp_path: Path) -> dict:
    """The config of the embedded default: a SQLite file and a filesystem:// broker in tmp."""
    url = f"sqlite:///{tmp_path / 'embedded.db'}"
    upgrade(url)
    return load_config(
        {
            "DATABASE_URL": url,
            "BROKER_URL": f"filesystem://{tmp_path / 'broker'}",
            "LEASE_SECONDS": 15,
            "MAX_ATTEMPTS": 3,
            "SWEEP_SECONDS": 2,
        }
    )


# --- the API, driven like a requester's browser --------------------------------------------

# Northbridge General Hospital research office: invented studies for the demos and tests.
PROTOCOL = {"id": "NGH-2024-031", "title": "Home blood-pressure coaching after discharge"}
REQUESTER = {
    "name": "Dr. Mira Castell",
    "email": "m.castell@northbridge.example",
    "department": "Cardiology",
}
ENDED = ("computed", "approved", "returned", "failed", "cancelled")


class Stack:
    """Drive the API with Flask test clients carrying real bearer tokens, as the office would."""

    def __init__(self, app):
        # The research office submits and cancels; reruns are the auditor's alone.
        self.client = local_client(app, "statistician", "research-office")
        self.auditor = local_client(app, "auditor", "reproducibility check")

    def submit(self, question: dict) -> str:
        """POST a request with ``question``; return its id (the API answers 202)."""
        reply = self.client.post(
            "/v1/requests",
            json={"protocol": PROTOCOL, "requester": REQUESTER, "question": question},
        )
        assert reply.status_code == 202, reply.get_json()
        return reply.get_json()["id"]

    def get(self, request_id: str) -> dict:
        """GET the request's detail."""
        reply = self.client.get(f"/v1/requests/{request_id}")
        assert reply.status_code == 200, reply.get_json()
        return reply.get_json()

    def wait(self, request_id: str, until=ENDED, timeout: float = 60.0, worker=None) -> dict:
        """Poll the request until its status is in ``until`` (bounded by ``timeout``)."""
        deadline = time.monotonic() + timeout
        while True:
            body = self.get(request_id)
            if body["status"] in until:
                return body
            if time.monotonic() > deadline:
                log = worker.tail() if worker is not None else ""
                raise AssertionError(
                    f"request {request_id} still {body['status']} after {timeout} s\n{log}"
                )
            time.sleep(0.25)

    def cancel(self, request_id: str) -> dict:
        """POST a cancel for the request."""
        reply = self.client.post(
            f"/v1/requests/{request_id}/cancel",
            json={"reason": "protocol withdrawn"},
        )
        assert reply.status_code == 200, reply.get_json()
        return reply.get_json()

    def rerun(self, request_id: str, timeout: float = 60.0, worker=None) -> dict:
        """Ask for a rerun and poll it until it is done or failed."""
        reply = self.auditor.post(
            f"/v1/requests/{request_id}/reruns", json={"note": "reproducibility check"}
        )
        assert reply.status_code == 202, reply.get_json()
        rerun_id = reply.get_json()["id"]
        deadline = time.monotonic() + timeout
        while True:
            body = self.auditor.get(f"/v1/requests/{request_id}/reruns/{rerun_id}").get_json()
            if body["status"] in ("done", "failed"):
                return body
            if time.monotonic() > deadline:
                log = worker.tail() if worker is not None else ""
                raise AssertionError(f"rerun {rerun_id} still {body['status']}\n{log}")
            time.sleep(0.25)


def canonical(record: dict) -> str:
    """The canonical JSON of a record (what the hash covers)."""
    return canonical_json(record)
