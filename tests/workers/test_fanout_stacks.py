"""A split simulation on real workers, on both stacks: the embedded default (SQLite + the folder
broker) and PostgreSQL + Redis.

One worker process computes the question alone; then a worker with two pool processes computes it
again, the job split into work units. Both pool processes compute units (the worker's log says
how many each did), the two records are byte-identical, and nothing is left behind: no unit rows
and no message in either queue.
"""

from __future__ import annotations

import json
import re
import time
from pathlib import Path

import pytest
from sqlalchemy import func, select
from workers_testkit import Stack, canonical

from service.store.db import session_scope
from service.store.models import ChunkResult

pytestmark = [pytest.mark.services, pytest.mark.slow]

SPLIT = re.compile(r"a batch split into (\d+) units: (\d+) computed here, (\d+) by other workers")
HELPED = re.compile(r"a helper computed (\d+) unit")


@pytest.fixture(params=["embedded", "pg_redis"])
def services(request) -> dict:
    """The config of one stack: the embedded default or PostgreSQL + Redis."""
    return request.getfixturevalue(f"{request.param}_config")


def _question() -> dict:
    # The rank-sum test draws every observation: 10,000 replicates at 500 per group take seconds,
    # long enough to split (the lowered threshold makes sure of it on a fast machine too).
    return {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"per_group": [500, 500]},
        "effect": {"difference": 0.2},
        "assumptions": {"sd": 1.0},
        "method": "simulation",
        "analysis": "rank_sum",
        "simulation": {"replicates": 10_000, "seed": 4242, "chunk_size": 500},
    }


def _unit_rows(config: dict) -> int:
    from workers.tasks import sessions

    with session_scope(sessions(config)) as session:
        return session.scalar(select(func.count()).select_from(ChunkResult))


def _queued(config: dict) -> list[int]:
    """Messages waiting in the request queue and the helper queue."""
    url = str(config["BROKER_URL"])
    if url.startswith("redis://"):
        import redis

        client = redis.Redis.from_url(url)
        try:
            return [client.llen(q) for q in ("sizewise", "sizewise.helpers")]
        finally:
            client.close()
    folder = Path(config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"])
    names = [p.name for p in folder.iterdir()] if folder.exists() else []
    return [
        sum(1 for n in names if n.endswith(".sizewise.msg")),
        sum(1 for n in names if n.endswith(".sizewise.helpers.msg")),
    ]


def _messages(worker) -> list[str]:
    out = []
    for line in worker.log_path.read_text(errors="replace").splitlines():
        try:
            out.append(json.loads(line).get("message", ""))
        except (json.JSONDecodeError, AttributeError):
            out.append(line)
    return out


def test_two_pool_processes_share_a_split_job_with_the_digits_of_one(services, start_worker):
    from service import create_app

    config = dict(services, FANOUT_SPLIT_SECONDS=0.2)
    app = create_app(dict(config, TESTING=True))
    try:
        stack = Stack(app)
        one = start_worker(dict(config, FANOUT_HELPERS=0), concurrency=1)
        first = stack.wait(stack.submit(_question()), worker=one, timeout=180)
        one.stop()
        assert not any(SPLIT.search(m) for m in _messages(one))  # alone: never split

        two = start_worker(dict(config, FANOUT_HELPERS=1), concurrency=2)
        second = stack.wait(stack.submit(_question()), worker=two, timeout=180)
    finally:
        app.extensions["sizewise"]["engine"].dispose()
    assert first["status"] == second["status"] == "computed", (first["error"], second["error"])
    assert canonical(first["result"]) == canonical(second["result"])
    assert (
        first["result"]["reproducibility"]["record_sha256"]
        == second["result"]["reproducibility"]["record_sha256"]
    )

    messages = _messages(two)
    splits = [tuple(map(int, m.groups())) for m in map(SPLIT.search, messages) if m]
    helped = [int(m.group(1)) for m in map(HELPED.search, messages) if m]
    assert splits, two.tail(30)
    # Every unit was computed once, by the owner of the job or by the helper, and both worked.
    units = sum(s[0] for s in splits)
    here = sum(s[1] for s in splits)
    assert here >= 1 and sum(helped) >= 1, two.tail(30)
    assert here + sum(helped) == units == here + sum(s[2] for s in splits)

    # Nothing is left behind: no unit rows, no message in either queue (a helper message
    # delivered after the job ended finds nothing and is acknowledged).
    assert _unit_rows(config) == 0
    for _ in range(100):
        left = _queued(config)
        if left == [0, 0]:
            break
        time.sleep(0.1)
    assert left == [0, 0]
