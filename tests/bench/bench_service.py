"""Service benchmark: the pipeline end to end, printed next to the goals of the job-pipeline issue.

Starts the embedded default (SQLite + the folder broker, gunicorn with 2 sync workers, one Celery
worker) in a temporary folder and, when PostgreSQL and Redis answer on 127.0.0.1, the same with
PostgreSQL + Redis. Prints, for each: POST /v1/calculations throughput and p99 (client: Python
threads over http.client, one connection per call, concurrency 8), submit→computed latency of an
analytic question and of a 2,000-replicate simulation, the same right behind a 200,000-replicate
job, and a 1,000,000-replicate job on one worker process and on two (speed-up, identical record,
queues empty afterwards). Timings on a shared machine are noisy: read them as one run's numbers.

Run with ``make bench-service``. Nothing here is asserted; tests assert behaviour, not time.
"""

from __future__ import annotations

import http.client
import json
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
PY = sys.executable
CONCURRENCY = 8

ANALYTIC = {"design": "two_means", "find": "sample_size", "effect": {"difference": 0.5, "sd": 1.0}}


def simulation(replicates: int, seed: int) -> dict:
    return {
        "design": "two_means",
        "find": "power",
        "sample_size": {"per_arm": [64, 64]},
        "effect": {"difference": 0.5, "sd": 1.0},
        "method": "simulation",
        "simulation": {"replicates": replicates, "seed": seed, "chunk_size": 1000},
    }


def body(question: dict) -> dict:
    return {
        "protocol": {"id": "NGH-BENCH-1", "title": "Northbridge General Hospital load check"},
        "requester": {
            "name": "Clinical Research Office",
            "email": "cro@northbridge-general.example",
            "department": "Research office",
        },
        "question": question,
    }


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Stack:
    """API (gunicorn) + Celery worker subprocesses on one database and broker."""

    def __init__(self, name: str, env: dict, folder: Path):
        self.name, self.env, self.folder = name, env, folder
        self.port = free_port()
        self.procs: list[subprocess.Popen] = []
        self.worker: subprocess.Popen | None = None

    def start_api(self) -> None:
        env = dict(self.env, GUNICORN_CMD_ARGS=f"--bind 127.0.0.1:{self.port}")
        cmd = [PY, "-m", "gunicorn", "--workers", "2", "--worker-class", "sync", "--log-level",
               "warning", "service:create_app()"]  # fmt: skip
        log = open(self.folder / f"api-{self.name}.log", "ab")  # noqa: SIM115
        self.procs.append(subprocess.Popen(cmd, cwd=REPO, env=env, stdout=log, stderr=log))
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            try:
                if self.call("GET", "/healthz")[0] == 200:
                    return
            except OSError:
                time.sleep(0.2)
        raise RuntimeError(f"API did not start; see {self.folder}")

    def start_worker(self, processes: int) -> None:
        self.stop_worker()
        env = dict(self.env, SIZEWISE_WORKER_CONCURRENCY=str(processes),
                   SIZEWISE_FANOUT_HELPERS=str(processes - 1))  # fmt: skip
        cmd = [PY, "-m", "celery", "-A", "workers.celery_app", "worker", "--concurrency",
               str(processes), "-Q", "sizewise,sizewise.helpers", "--without-gossip",
               "--without-mingle", "--without-heartbeat", "--loglevel", "WARNING"]  # fmt: skip
        log = open(self.folder / f"worker-{self.name}.log", "ab")  # noqa: SIM115
        self.worker = subprocess.Popen(cmd, cwd=REPO, env=env, stdout=log, stderr=log)
        time.sleep(4)  # ready well before the first message is timed

    def stop_worker(self) -> None:
        if self.worker is not None:
            self.worker.terminate()
            self.worker.wait(30)
            self.worker = None

    def stop(self) -> None:
        self.stop_worker()
        for proc in self.procs:
            proc.terminate()
            proc.wait(30)

    def call(self, method: str, path: str, payload=None, conn=None) -> tuple[int, dict]:
        own = conn is None
        conn = conn or http.client.HTTPConnection("127.0.0.1", self.port, timeout=30)
        headers = {"Authorization": f"Bearer {self.env['BENCH_TOKEN']}"}
        data = None
        if payload is not None:
            data = json.dumps(payload)
            headers["Content-Type"] = "application/json"
        conn.request(method, path, body=data, headers=headers)
        reply = conn.getresponse()
        raw = reply.read()
        if own:
            conn.close()
        return reply.status, (json.loads(raw) if raw and raw[:1] in b"{[" else {})

    def submit(self, question: dict) -> tuple[str, float]:
        started = time.perf_counter()
        status, reply = self.call("POST", "/v1/requests", body(question))
        if status not in (200, 201, 202):
            raise RuntimeError(f"submit: {status} {reply}")
        return reply["id"], started

    def wait(self, request_id: str, started: float, timeout: float = 600) -> tuple[float, dict]:
        while time.perf_counter() - started < timeout:
            _, reply = self.call("GET", f"/v1/requests/{request_id}")
            if reply.get("status") in ("computed", "failed", "cancelled"):
                return time.perf_counter() - started, reply
            time.sleep(0.005)
        raise RuntimeError(f"{request_id} not done after {timeout} s")


def throughput(stack: Stack, total: int = 1500) -> tuple[float, float]:
    latencies: list[float] = []
    lock = threading.Lock()
    payload = {"question": ANALYTIC}

    def client(n: int) -> None:
        mine = []
        for _ in range(n):
            t = time.perf_counter()
            # A new connection per call: gunicorn's sync workers close each one anyway.
            status, _ = stack.call("POST", "/v1/calculations", payload)
            mine.append(time.perf_counter() - t)
            if status != 200:
                raise RuntimeError(f"calculations: {status}")
        with lock:
            latencies.extend(mine)

    threads = [threading.Thread(target=client, args=(total // CONCURRENCY,)) for _ in range(8)]
    started = time.perf_counter()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    elapsed = time.perf_counter() - started
    latencies.sort()
    return len(latencies) / elapsed, latencies[int(0.99 * (len(latencies) - 1))]


def queues_empty(stack: Stack) -> str:
    url = stack.env["SIZEWISE_BROKER_URL"]
    if url.startswith("redis://"):
        import redis

        client = redis.Redis.from_url(url)
        lengths = [client.llen(q) for q in ("sizewise", "sizewise.helpers")]
        return "yes" if lengths == [0, 0] else f"no {lengths}"
    folder = Path(url.removeprefix("filesystem://")) / "queue"
    left = list(folder.iterdir()) if folder.exists() else []
    return "yes" if not left else f"no ({len(left)} files)"


def line(what: str, value: str, goal: str) -> None:
    print(f"  {what:<58} {value:>22}   goal {goal}")


def run(stack: Stack) -> None:
    print(f"\n== {stack.name} ==")
    stack.start_api()
    stack.start_worker(2)
    rate, p99 = throughput(stack)
    line(f"POST /v1/calculations ({CONCURRENCY} client threads)", f"{rate:.0f} req/s p99 {p99 * 1000:.1f} ms", ">= 500 req/s, p99 <= 20 ms")  # fmt: skip
    stack.wait(*stack.submit(simulation(2000, 1)))  # warm the worker
    analytic = statistics.median(stack.wait(*stack.submit(ANALYTIC))[0] for _ in range(5))
    line("submit -> computed, analytic (median of 5)", f"{analytic * 1000:.0f} ms", "<= 50 ms")
    sim = statistics.median(stack.wait(*stack.submit(simulation(2000, s)))[0] for s in range(2, 7))
    line("submit -> computed, 2,000-replicate simulation (median of 5)", f"{sim * 1000:.0f} ms", "<= 250 ms")  # fmt: skip
    big = stack.submit(simulation(200_000, 11))
    time.sleep(0.1)
    behind_a = stack.wait(*stack.submit(ANALYTIC))[0]
    stack.wait(*big)
    big = stack.submit(simulation(200_000, 12))
    time.sleep(0.1)
    behind_s = stack.wait(*stack.submit(simulation(2000, 13)))[0]
    stack.wait(*big)
    line("analytic right behind a 200,000-replicate job", f"{behind_a * 1000:.0f} ms", "<= 1 s")
    line("2,000-replicate simulation right behind a 200,000-replicate job", f"{behind_s * 1000:.0f} ms", "<= 1 s")  # fmt: skip
    records = {}
    times = {}
    for processes in (1, 2):
        stack.start_worker(processes)
        times[processes], reply = stack.wait(*stack.submit(simulation(1_000_000, 99)))
        records[processes] = reply["result"]["reproducibility"]["record_sha256"]
        time.sleep(1.0)  # helper messages delivered after the job find nothing and leave
        line(f"1,000,000 replicates, {processes} worker process(es)", f"{times[processes]:.2f} s", "")  # fmt: skip
        line("  queues empty afterwards", queues_empty(stack), "yes")
    line("  speed-up two processes vs one", f"{times[1] / times[2]:.2f}x", ">= 1.8x")
    line("  record identical (sha256)", "yes" if records[1] == records[2] else "NO", "yes")


def prepare(name: str, database_url: str, broker_url: str, folder: Path) -> Stack:
    from service.store import tokens
    from service.store.db import make_engine, make_sessionmaker, session_scope
    from service.store.migrate import upgrade

    upgrade(database_url)
    engine = make_engine(database_url)
    with session_scope(make_sessionmaker(engine)) as session:
        _, secret = tokens.create_token(session, "statistician", "bench.runner")
    engine.dispose()
    env = dict(
        os.environ,
        SIZEWISE_DATABASE_URL=database_url,
        SIZEWISE_BROKER_URL=broker_url,
        SIZEWISE_RATE_LIMIT="1000000/minute",
        SIZEWISE_VAR_DIR=str(folder),
        SIZEWISE_SECRET_KEY="bench",
        PYTHONPATH=str(REPO),
        BENCH_TOKEN=secret,
    )
    return Stack(name, env, folder)


def services_up() -> bool:
    for port in (5432, 6379):
        try:
            socket.create_connection(("127.0.0.1", port), timeout=1).close()
        except OSError:
            return False
    return True


def main() -> None:
    print(__doc__.split("\n\n")[0])
    print(f"machine: {os.cpu_count()} cores (shared; numbers are one noisy run)")
    with tempfile.TemporaryDirectory(prefix="sizewise-bench-") as tmp:
        folder = Path(tmp)
        stacks = [
            prepare(
                "embedded default (SQLite + folder broker)",
                f"sqlite:///{folder / 'sizewise.db'}",
                f"filesystem://{folder / 'broker'}",
                folder,
            )
        ]
        if services_up():
            import psycopg

            name = f"sizewise_bench_{os.getpid()}"
            admin = "host=127.0.0.1 port=5432 user=postgres dbname=postgres"
            with psycopg.connect(admin, autocommit=True) as conn:
                conn.execute(f'CREATE DATABASE "{name}"')
            stacks.append(
                prepare(
                    "PostgreSQL + Redis",
                    f"postgresql+psycopg://postgres@127.0.0.1:5432/{name}",
                    "redis://127.0.0.1:6379/14",
                    folder,
                )
            )
        try:
            for stack in stacks:
                try:
                    run(stack)
                finally:
                    stack.stop()
        finally:
            if len(stacks) > 1:
                with psycopg.connect(admin, autocommit=True) as conn:
                    conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


if __name__ == "__main__":
    main()
