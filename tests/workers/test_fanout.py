"""The chunk executor: claims in chunk_results, takeover after a lease expires, engine order kept.

These tests drive the executor with a small seeded chunk function of the same shape as the
engine's (JSON in, JSON out, pure); test_tasks.py runs the real engine through it.
"""

from __future__ import annotations

import queue as queue_mod
import random
import threading
from datetime import timedelta

import numpy as np
import pytest
from sqlalchemy import func, select

from service.engine import Cancelled
from service.store.db import session_scope
from service.store.models import ChunkResult
from service.store.types import utcnow
from workers.fanout import ChunkExecutor, run_one, task_key


def seeded_chunk(task: dict) -> dict:
    """A pure chunk: the mean of n normal draws from the stream [index, seed]."""
    rng = np.random.default_rng([task["index"], task["seed"]])
    return {"index": task["index"], "mean": float(rng.standard_normal(task["n"]).mean())}


def batch(k: int = 12, seed: int = 7) -> list[dict]:
    return [{"index": i, "seed": seed, "n": 200} for i in range(k)]


class Counting:
    """Wrap a chunk function and count calls (optionally failing on purpose)."""

    def __init__(self, fn=seeded_chunk):
        self.fn = fn
        self.calls = 0
        self.lock = threading.Lock()

    def __call__(self, task: dict) -> dict:
        with self.lock:
            self.calls += 1
        return self.fn(task)


def executor(factory, job_id="job1", **kw) -> ChunkExecutor:
    kw.setdefault("owner", "worker:test:1:a")
    kw.setdefault("lease_seconds", 30)
    kw.setdefault("poll_seconds", 0.05)
    kw.setdefault("runner", seeded_chunk)
    return ChunkExecutor(factory, job_kind="request", job_id=job_id, **kw)


def shuffled(seed: int):
    rng = random.Random(seed)

    def order(indices: list[int]) -> list[int]:
        rng.shuffle(indices)
        return indices

    return order


def test_shuffled_order_returns_results_in_the_batch_order(factory):
    tasks = batch()
    expected = [seeded_chunk(t) for t in tasks]  # what the engine's in-process default returns
    got = executor(factory, order=shuffled(3))(tasks)
    assert got == expected
    with session_scope(factory) as session:
        done = session.scalar(select(func.count()).where(ChunkResult.status == "done"))
    assert done == len(tasks)


def test_finished_chunks_are_reused_not_recomputed(factory):
    tasks = batch()
    first = executor(factory)(tasks)
    runner = Counting()
    again = executor(factory, owner="worker:test:2:b", runner=runner)(tasks)
    assert again == first and runner.calls == 0


def test_identical_tasks_share_one_row_and_one_result(factory):
    task = batch(1)[0]
    runner = Counting()
    got = executor(factory, runner=runner)([task, dict(task), task])
    assert got == [seeded_chunk(task)] * 3 and runner.calls == 1


def test_every_missing_chunk_is_published_when_the_batch_has_several(factory):
    tasks = batch(5)
    sent: list[tuple] = []
    executor(factory, publish=lambda kind, job, task: sent.append((kind, job, task)) or True)(tasks)
    assert sent == [("request", "job1", t) for t in tasks]
    sent.clear()
    executor(factory, job_id="job2", publish=lambda *a: sent.append(a) or True)(tasks[:1])
    assert sent == []  # one chunk: nothing to share


def test_a_chunk_left_by_a_dead_worker_is_redone_after_its_lease_expires(factory):
    tasks = batch(4)
    with session_scope(factory) as session:
        session.add(
            ChunkResult(
                job_kind="request",
                job_id="job1",
                task_key=task_key(tasks[2]),
                status="running",
                lease_owner="worker:gone:9:dead",
                lease_expires_at=utcnow() + timedelta(seconds=1),
            )
        )
    runner = Counting()
    got = executor(factory, runner=runner)(tasks)
    assert got == [seeded_chunk(t) for t in tasks]
    assert runner.calls == 4  # including the dead worker's chunk, once its lease ran out
    with session_scope(factory) as session:
        owner = session.scalar(
            select(ChunkResult.lease_owner).where(ChunkResult.task_key == task_key(tasks[2]))
        )
    assert owner == "worker:test:1:a"


def test_a_helper_worker_shares_the_batch_and_the_digits_do_not_change(factory):
    tasks = batch(30)
    inbox: queue_mod.Queue = queue_mod.Queue()
    helper_runner = Counting()

    def helper() -> None:
        while (item := inbox.get()) is not None:
            kind, job_id, task = item
            run_one(
                factory,
                job_kind=kind,
                job_id=job_id,
                task=task,
                owner="worker:helper:2:b",
                lease_seconds=30,
                runner=helper_runner,
            )

    thread = threading.Thread(target=helper)
    thread.start()
    own_runner = Counting()
    try:
        got = executor(factory, publish=lambda *a: inbox.put(a) or True, runner=own_runner)(tasks)
    finally:
        inbox.put(None)
        thread.join(30)
    assert got == [seeded_chunk(t) for t in tasks]
    # Each chunk was computed by exactly one of the two (claims never overlap).
    assert own_runner.calls + helper_runner.calls == len(tasks)
    assert (
        run_one(
            factory,
            job_kind="request",
            job_id="job1",
            task=tasks[0],
            owner="worker:late:3:c",
            lease_seconds=30,
            runner=seeded_chunk,
        )
        == "done"
    )


def test_a_stop_request_is_honoured_between_chunks(factory):
    runner = Counting()
    ex = executor(factory, runner=runner, should_stop=lambda: runner.calls >= 3)
    with pytest.raises(Cancelled):
        ex(batch(10))
    assert runner.calls == 3
