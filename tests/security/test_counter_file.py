"""The embedded default's rate-limit counter file counts exactly across processes and threads.

Each thread of each process keeps its own connection to the file (opened again after a fork);
these check that the count stays exact under that reuse: several real processes, each with
several threads, increment one key, and the total is the exact number of increments.
"""

from __future__ import annotations

import multiprocessing
import os
import sqlite3
import threading
from pathlib import Path

from service.api.counters import SqliteFileStorage

PROCESSES, THREADS, HITS = 3, 4, 50


def _hammer(uri: str, results) -> None:
    storage = SqliteFileStorage(uri)
    seen: list[int] = []
    lock = threading.Lock()

    def run() -> None:
        mine = [storage.incr("token:a", 3600) for _ in range(HITS)]
        with lock:
            seen.extend(mine)

    threads = [threading.Thread(target=run) for _ in range(THREADS)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    results.put(seen)


def test_counts_are_exact_across_processes_and_threads(tmp_path: Path):
    uri = f"sizewise+sqlite://{tmp_path / 'ratelimit.sqlite'}"
    SqliteFileStorage(uri)  # creates the file
    context = multiprocessing.get_context("fork")
    results = context.Queue()
    procs = [context.Process(target=_hammer, args=(uri, results)) for _ in range(PROCESSES)]
    for proc in procs:
        proc.start()
    seen = sorted(n for _ in procs for n in results.get(timeout=120))
    for proc in procs:
        proc.join(60)
    total = PROCESSES * THREADS * HITS
    # Every increment saw a distinct count: none lost, none counted twice.
    assert seen == list(range(1, total + 1))
    assert SqliteFileStorage(uri).get("token:a") == total
    mode = sqlite3.connect(tmp_path / "ratelimit.sqlite").execute("PRAGMA journal_mode").fetchone()
    assert mode == ("wal",)
    assert (tmp_path / "ratelimit.sqlite").stat().st_mode & 0o777 == 0o600


def test_a_forked_child_opens_its_own_connection(tmp_path: Path):
    storage = SqliteFileStorage(f"sizewise+sqlite://{tmp_path / 'ratelimit.sqlite'}")
    assert storage.incr("k", 60) == 1  # the parent's connection is open now
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child: the parent's connection must not be reused
        try:
            os.write(write, str(storage.incr("k", 60)).encode())
        finally:
            os._exit(0)
    os.close(write)
    os.waitpid(pid, 0)
    assert os.read(read, 16) == b"2"
    assert storage.incr("k", 60) == 3
    assert (storage.get("k"), storage.get("other")) == (3, 0)


def test_an_expired_window_starts_again_and_clear_forgets(tmp_path: Path):
    storage = SqliteFileStorage(f"sizewise+sqlite://{tmp_path / 'ratelimit.sqlite'}")
    assert [storage.incr("k", -1) for _ in range(3)] == [1, 1, 1]  # each window already over
    assert storage.incr("j", 60, amount=5) == 5
    storage.clear("j")
    assert storage.get("j") == 0
    assert storage.check()


def test_writers_queue_on_the_lock_file_not_on_sqlites_busy_handler(tmp_path: Path):
    """An increment waits for whoever holds the sidecar lock (another process's writer), then
    counts; it never opens a write transaction while the lock is taken elsewhere."""
    import fcntl

    storage = SqliteFileStorage(f"sizewise+sqlite://{tmp_path / 'ratelimit.sqlite'}")
    lock_file = tmp_path / "ratelimit.sqlite.lock"
    assert lock_file.stat().st_mode & 0o777 == 0o600
    done: list[int] = []
    holder = os.open(lock_file, os.O_RDWR)
    fcntl.flock(holder, fcntl.LOCK_EX)  # as another process's writer would hold it
    try:
        waiter = threading.Thread(target=lambda: done.append(storage.incr("k", 60)))
        waiter.start()
        waiter.join(0.5)
        assert waiter.is_alive() and done == []  # still queued behind the holder
        # While it waits, the database's write lock is free: the holder can write directly.
        direct = sqlite3.connect(tmp_path / "ratelimit.sqlite", timeout=0, isolation_level=None)
        direct.execute("BEGIN IMMEDIATE")
        direct.execute("INSERT INTO counters (key, n, expires) VALUES ('other', 1, 9e99)")
        direct.execute("COMMIT")
        direct.close()
    finally:
        fcntl.flock(holder, fcntl.LOCK_UN)
        os.close(holder)
    waiter.join(60)
    assert done == [1]
    assert (storage.get("k"), storage.get("other")) == (1, 1)


def test_a_thread_holds_its_own_lock_descriptor(tmp_path: Path):
    """flock counts open descriptors, not processes: threads of one process must not share one,
    or a second thread would walk into a write another thread of the process is making. A
    thread's descriptor closes when the thread ends."""
    import gc
    import weakref

    storage = SqliteFileStorage(f"sizewise+sqlite://{tmp_path / 'ratelimit.sqlite'}")
    files = []

    def record() -> None:
        storage.incr("k", 60)
        files.append(weakref.ref(storage._local.lock_file))

    threads = [threading.Thread(target=record) for _ in range(3)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(60)
    record()
    assert storage.get("k") == 4
    gc.collect()
    # The three ended threads' descriptors are gone; this thread's is open and its own.
    assert [f() is None for f in files] == [True, True, True, False]
    assert not files[3]().closed
