"""The executor: a batch runs locally unless sharing pays; shared work units in chunk_results.

These tests drive the executor with a small seeded chunk function of the same shape as the
engine's (JSON in, JSON out, pure); test_tasks.py runs the real engine through it. The reference
for every result is that function called in-process, in the batch's order.
"""

from __future__ import annotations

import random
import threading
from datetime import timedelta

import numpy as np
import pytest
from sqlalchemy import select

from service.engine import Cancelled
from service.store.db import session_scope
from service.store.models import ChunkResult
from service.store.types import utcnow
from workers.fanout import ChunkExecutor, _text, clear_units, task_key, work_units


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
    kw.setdefault("poll_seconds", 0.01)
    kw.setdefault("runner", seeded_chunk)
    return ChunkExecutor(factory, job_kind="request", job_id=job_id, **kw)


def shuffled(seed: int):
    rng = random.Random(seed)

    def order(indices: list[int]) -> list[int]:
        rng.shuffle(indices)
        return indices

    return order


def sharing(factory, job_id="job1", *, helpers=1, sent=None, **kw) -> ChunkExecutor:
    """An executor that splits at once into units of about two chunks (the timing is forced)."""
    sent = [] if sent is None else sent
    ex = executor(
        factory,
        job_id=job_id,
        publish_helpers=lambda n: sent.append(n) or n,
        helpers=helpers,
        split_seconds=0.0,
        **kw,
    )
    ex.unit_seconds = 0.0  # one chunk per unit
    return ex


def rows(factory, job_id="job1") -> list[ChunkResult]:
    with session_scope(factory) as session:
        found = session.scalars(select(ChunkResult).where(ChunkResult.job_id == job_id)).all()
        session.expunge_all()
        return list(found)


def test_a_short_batch_runs_locally_in_the_batch_order_and_writes_nothing(factory):
    tasks = batch()
    expected = [seeded_chunk(t) for t in tasks]  # what the engine's in-process default returns
    sent: list[int] = []
    got = executor(
        factory, order=shuffled(3), publish_helpers=lambda n: sent.append(n) or n, helpers=1
    )(tasks)
    assert got == expected
    assert sent == [] and rows(factory) == []  # well under a second: no sharing, no round trip


def test_identical_tasks_are_computed_once(factory):
    task = batch(1)[0]
    runner = Counting()
    got = executor(factory, runner=runner)([task, dict(task), task])
    assert got == [seeded_chunk(task)] * 3 and runner.calls == 1


def test_a_long_batch_is_cut_into_units_and_a_few_helpers_are_published(factory):
    tasks = batch(9)
    sent: list[int] = []
    ex = sharing(factory, sent=sent, helpers=3)
    got = ex(tasks)
    assert got == [seeded_chunk(t) for t in tasks]
    # Three chunks measured the speed; the other 6 became units; at most `helpers` messages.
    assert ex.units == 6 and sent == [3]
    units = rows(factory)
    assert len(units) == 6 and {u.status for u in units} == {"done"}
    assert [t for u in sorted(units, key=lambda u: u.id) for t in u.tasks] == tasks[3:]
    with session_scope(factory) as session:
        assert clear_units(session, "request", "job1") == 6
    assert rows(factory) == []


def test_a_helper_shares_the_units_and_the_digits_do_not_change(factory):
    tasks = batch(40)
    helper_runner = Counting(slow(seeded_chunk))
    own_runner = Counting(slow(seeded_chunk))
    helped: list[int] = []

    def publish(n: int) -> int:
        def helper() -> None:
            helped.append(
                work_units(
                    factory,
                    job_kind="request",
                    job_id="job1",
                    owner="worker:helper:2:b",
                    runner=helper_runner,
                )
            )

        threads.append(threading.Thread(target=helper))
        threads[-1].start()
        return n

    threads: list[threading.Thread] = []
    ex = executor(factory, publish_helpers=publish, helpers=1, split_seconds=0.0, runner=own_runner)
    ex.unit_seconds = 0.0
    got = ex(tasks)
    for thread in threads:
        thread.join(30)
    assert got == [seeded_chunk(t) for t in tasks]
    # Each chunk was computed by exactly one of the two (claims never overlap), both worked.
    assert own_runner.calls + helper_runner.calls == len(tasks)
    assert helper_runner.calls >= 1 and ex.units_by_others == helped[0] >= 1
    # A helper arriving after the end finds nothing and leaves at once.
    late = Counting()
    assert work_units(factory, job_kind="request", job_id="job1", owner="w:l:3:c", runner=late) == 0
    assert late.calls == 0


def slow(fn, seconds: float = 0.01):
    import time

    def run(task: dict) -> dict:
        time.sleep(seconds)
        return fn(task)

    return run


def test_a_unit_left_by_a_dead_worker_is_redone_after_its_lease_expires(factory):
    tasks = batch(6)  # three measured here, then three units of one chunk
    with session_scope(factory) as session:
        session.add(
            ChunkResult(
                job_kind="request",
                job_id="job1",
                task_key=task_key([tasks[4]]),
                tasks=[tasks[4]],
                status="running",
                lease_owner="worker:gone:9:dead",
                lease_expires_at=utcnow() + timedelta(seconds=0.5),
            )
        )
    runner = Counting()
    ex = sharing(factory, runner=runner)
    got = ex(tasks)
    assert got == [seeded_chunk(t) for t in tasks]
    assert runner.calls == 6  # including the dead worker's unit, once its lease ran out
    owners = {u.task_key: u.lease_owner for u in rows(factory)}
    assert owners[task_key([tasks[4]])] == "worker:test:1:a"


def test_a_retried_job_reuses_the_units_its_first_attempt_finished(factory):
    tasks = batch(6)
    first = sharing(factory)(tasks)
    runner = Counting()
    again = sharing(factory, owner="worker:test:2:b", runner=runner)(tasks)
    assert again == first
    assert runner.calls == 3  # only the chunks the first attempt ran locally (never units)


def test_a_stop_request_is_honoured_between_chunks(factory):
    runner = Counting()
    ex = executor(factory, runner=runner, should_stop=lambda: runner.calls >= 3)
    with pytest.raises(Cancelled):
        ex(batch(10))
    assert runner.calls == 3


def test_units_shrink_towards_the_end_and_keep_the_batch_order(factory):
    # 0.01 s a task, two processes: each unit about a quarter of what is left, between 0.05 s
    # (5 tasks) and 0.5 s (50 tasks), so both finish close together.
    ex = executor(factory, publish_helpers=lambda n: n, helpers=1)
    ex.rate = 0.01  # seconds per task (these tasks weigh 1)
    tasks = batch(400)
    units = ex._units([(t, _text(t)) for t in tasks])
    sizes = [len(u) for u in units]
    assert [t for u in units for t, _ in u] == tasks
    assert sizes == sorted(sizes, reverse=True) and sizes[0] == 50
    assert all(s >= 5 for s in sizes[:-1]) and sizes[-1] <= 5
    # Further on, each unit is about a quarter of what is left (rounded down to whole tasks).
    left = 400
    for size in sizes[:-1]:
        assert size == min(50, max(5, int(left / 4))), sizes
        left -= size


def test_units_are_inserted_once_and_a_second_insert_keeps_the_rows(factory):
    from workers.fanout import add_units

    units = [batch(3), batch(2, seed=8)]
    with session_scope(factory) as session:
        keys = add_units(session, "request", "job1", units)
    with session_scope(factory) as session:
        assert add_units(session, "request", "job1", units) == keys  # duplicates: no error
    stored = rows(factory)
    assert [u.task_key for u in stored] == keys == [task_key(u) for u in units]
    assert [u.tasks for u in stored] == units and {u.status for u in stored} == {"pending"}


def test_the_speed_is_measured_on_a_few_chunks_and_the_fastest_one_counts(factory):
    # The first chunk of a process can be many times slower than the rest (cold caches, a
    # preemption); units planned from it were a few milliseconds each.
    import time as clock

    calls = []

    def first_slow(task: dict) -> dict:
        calls.append(1)
        if len(calls) == 1:
            clock.sleep(0.02)
        return seeded_chunk(task)

    ex = executor(factory, runner=first_slow, publish_helpers=lambda n: n, helpers=1)
    ex.split_seconds = 1e9  # never split: only the measurement is looked at
    ex(batch(4))
    assert ex.computed == 4 and ex._measured()
    assert ex.rate < 0.02  # the first chunk took at least 0.02 s: its rate is not the one kept
