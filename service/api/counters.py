"""Rate-limit counters in a SQLite file, shared by every API process on one host.

The embedded default runs several gunicorn workers and no Redis; counters in each process's
memory would let a caller make the configured rate once per process. This ``limits`` storage
keeps the fixed-window counters in one SQLite file instead (``sizewise+sqlite:///path``); each
increment is one write transaction, so concurrent processes count exactly.

Each thread of each process keeps one open connection (opening one costs more than the count),
and the file is in WAL mode with ``synchronous=NORMAL``: a commit appends to the log without an
fsync, readers never wait for the writer, and exactness comes from the write lock, not from the
disk. A power cut may lose the last counts of a window (they are throttling state, not records).

An increment is one ``INSERT … ON CONFLICT DO UPDATE … RETURNING`` statement (its own
transaction), and writers queue on an ``flock`` of a sidecar file (``<file>.lock``, one open
descriptor per thread) before it, so the SQLite write lock is never found taken. SQLite's own
busy handler polls a taken lock with sleeps of 1, 2, 5, 10, 15, 20 … 100 ms, so under a steady
load of increments from several processes a waiter slept past the moment the lock came free:
measured with wrk against the two-process API, about one increment in four waited over 3 ms
and some over 100 ms, the largest share of the served path's p99. A blocked ``flock`` is woken
by the kernel as soon as the holder lets go (or dies: the kernel drops a dead process's lock).

The X-RateLimit headers are answered from the increment itself. Flask-Limiter asks its strategy
for the window's stats after the hit (``get`` of the count, then ``get_expiry``): two more
trips to the store per request, and a count that may already include other callers' calls.
Both storages here return the count and the window's end with the increment and keep them for
this thread (``WindowMemo``); the ``get`` and ``get_expiry`` that follow an increment of the same
key in the same thread are answered from it, each once, so the headers say what this request's
own increment left. Any other read goes to the store. ``RedisWindowStorage`` does this for
Redis (``sizewise+redis://``; ``window_storage_url`` maps ``redis://`` to it): one Lua script runs
INCRBY, EXPIRE on a new window and TTL, one round trip instead of three, and the count is still
the one Redis key every process shares.
"""

from __future__ import annotations

import fcntl
import os
import sqlite3
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from limits.storage import RedisStorage, Storage

SCHEME = "sizewise+sqlite"
REDIS_SCHEMES = {"redis": "sizewise+redis", "rediss": "sizewise+rediss"}
_TABLE = "CREATE TABLE IF NOT EXISTS counters (key TEXT PRIMARY KEY, n INTEGER, expires REAL)"
# Add to the key's count, or start a new window (count = amount) when it has none or it expired.
_UPSERT = (
    "INSERT INTO counters (key, n, expires) VALUES (?1, ?2, ?3) ON CONFLICT (key) DO UPDATE SET"
    " n = CASE WHEN expires <= ?4 THEN excluded.n ELSE n + excluded.n END,"
    " expires = CASE WHEN expires <= ?5 THEN excluded.expires ELSE expires END"
    " RETURNING n, expires"
)


class WindowMemo:
    """This thread's last increment (key, count, window end), read back once by the stats."""

    def __init__(self) -> None:
        self._local = threading.local()

    def remember(self, key: str, count: int, expires: float) -> None:
        self._local.entry = [key, count, expires]

    def count(self, key: str) -> int | None:
        """The count of this thread's last increment of ``key`` (once), else None."""
        entry = getattr(self._local, "entry", None)
        if entry is None or entry[0] != key or entry[1] is None:
            return None
        count, entry[1] = entry[1], None
        return count

    def forget(self) -> None:
        """Drop the entry (the store was cleared or reset: the count it holds is gone)."""
        self._local.entry = None

    def expiry(self, key: str) -> float | None:
        """The window end of this thread's last increment of ``key`` (once), else None."""
        entry = getattr(self._local, "entry", None)
        if entry is None or entry[0] != key:
            return None
        self._local.entry = None
        return entry[2]


class MemoFirst:
    """``get``, ``get_expiry``, ``clear`` and ``reset`` of a storage with a ``memo``: the stats of
    this thread's last increment come from the memo (each once), anything else from the store
    (the ``_stored_*`` hooks); clearing or resetting the store forgets the memo."""

    memo: WindowMemo

    def get(self, key: str) -> int:
        count = self.memo.count(key)
        return count if count is not None else self._stored_count(key)

    def get_expiry(self, key: str) -> float:
        expires = self.memo.expiry(key)
        return expires if expires is not None else self._stored_expiry(key)

    def clear(self, key: str) -> None:
        self.memo.forget()
        self._clear_stored(key)

    def reset(self) -> int | None:
        self.memo.forget()
        return self._reset_stored()

    # The store's own calls: the next storage class's methods (RedisStorage's), unless the
    # storage is the store itself and overrides them (SqliteFileStorage).
    def _stored_count(self, key: str) -> int:
        return super().get(key)

    def _stored_expiry(self, key: str) -> float:
        return super().get_expiry(key)

    def _clear_stored(self, key: str) -> None:
        super().clear(key)

    def _reset_stored(self) -> int | None:
        return super().reset()


def window_storage_url(url: str) -> str:
    """The storage URL the limiter is given: Redis URLs go to ``RedisWindowStorage``."""
    scheme, sep, rest = url.partition("://")
    return f"{REDIS_SCHEMES[scheme]}{sep}{rest}" if sep and scheme in REDIS_SCHEMES else url


# INCRBY, EXPIRE when the window is new (as the limits library's own script), and the TTL, in
# one round trip; Redis runs a script atomically, so the TTL is that of the window just counted.
_REDIS_INCR = """
local amount = tonumber(ARGV[2])
local current = redis.call("incrby", KEYS[1], amount)
if tonumber(current) == amount then
    redis.call("expire", KEYS[1], ARGV[1])
end
return {current, redis.call("ttl", KEYS[1])}
"""


class RedisWindowStorage(MemoFirst, RedisStorage):
    """Redis counters whose increment also returns the window's TTL (see the module's text)."""

    STORAGE_SCHEME = list(REDIS_SCHEMES.values())

    def __init__(self, uri: str, **options):
        scheme, _, rest = uri.partition("://")
        plain = {v: k for k, v in REDIS_SCHEMES.items()}.get(scheme, scheme)
        super().__init__(f"{plain}://{rest}", **options)
        self.memo = WindowMemo()
        self.lua_incr_ttl = self.get_connection().register_script(_REDIS_INCR)

    def incr(self, key: str, expiry: int, amount: int = 1) -> int:
        count, ttl = self.lua_incr_ttl([self.prefixed_key(key)], [expiry, amount])
        # As RedisStorage.get_expiry computes it from TTL: whole seconds left, from now.
        self.memo.remember(key, int(count), max(int(ttl), 0) + time.time())
        return int(count)


class SqliteFileStorage(MemoFirst, Storage):
    """Fixed-window counters in a SQLite file (the file is created 0600)."""

    STORAGE_SCHEME = [SCHEME]

    def __init__(self, uri: str | None = None, wrap_exceptions: bool = False, **options):
        super().__init__(uri, wrap_exceptions=wrap_exceptions, **options)
        self.path = Path((uri or "").split("://", 1)[1])
        self.lock_path = self.path.with_name(self.path.name + ".lock")
        self.path.parent.mkdir(parents=True, exist_ok=True)
        for path in (self.path, self.lock_path):
            if not path.exists():
                os.close(os.open(path, os.O_WRONLY | os.O_CREAT, 0o600))
        self._local = threading.local()
        self.memo = WindowMemo()
        # As the only writer: two API processes booting at once both switch the file to WAL,
        # and a journal-mode switch meeting another one fails at once ("database is locked")
        # instead of waiting, which stopped a worker's boot and with it the whole server.
        with self._writing() as conn:
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute(_TABLE)

    @property
    def base_exceptions(self) -> type[Exception]:
        return sqlite3.Error

    def _connect(self) -> sqlite3.Connection:
        """This thread's connection, opened once (again after a fork: a child needs its own)."""
        local = self._local
        conn = getattr(local, "conn", None)
        if conn is not None and local.pid == os.getpid():
            return conn
        inherited = getattr(local, "lock_file", None)
        if inherited is not None:  # the parent's descriptor: this process takes its own
            inherited.close()
            local.lock_file = None
        conn = sqlite3.connect(self.path, timeout=10, isolation_level=None, check_same_thread=True)
        conn.execute("PRAGMA busy_timeout=10000")
        conn.execute("PRAGMA synchronous=NORMAL")
        # A descriptor of its own per thread: flock treats two descriptors as two holders even
        # within one process (one shared descriptor would let this process's threads all in).
        # A file object, so a thread that ends closes it with its other thread-local state.
        local.lock_file = open(self.lock_path, "rb", buffering=0)  # noqa: SIM115
        local.conn, local.pid = conn, os.getpid()
        return conn

    @contextmanager
    def _writing(self) -> Iterator[sqlite3.Connection]:
        """This thread's connection, held as the only writer of the file on the host."""
        conn = self._connect()
        fd = self._local.lock_file.fileno()
        fcntl.flock(fd, fcntl.LOCK_EX)  # waits in the kernel, woken when the holder lets go
        try:
            yield conn
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)

    def _drop(self) -> None:
        """Forget this thread's connection after an error, so the next call opens a fresh one."""
        local = self._local
        conn, lock_file = getattr(local, "conn", None), getattr(local, "lock_file", None)
        local.conn = local.lock_file = None
        if conn is not None:
            try:
                conn.close()
            except sqlite3.Error:
                pass
        if lock_file is not None:
            lock_file.close()

    def incr(self, key: str, expiry: float, amount: int = 1) -> int:
        """Add ``amount`` to the key's count (a new window when it expired) and return the count."""
        try:
            with self._writing() as conn:
                count, expires = self._incr(conn, key, expiry, amount)
        except BaseException:
            self._drop()  # closing rolls back whatever the transaction had begun
            raise
        self.memo.remember(key, count, expires)
        return count

    @staticmethod
    def _incr(conn: sqlite3.Connection, key: str, expiry: float, amount: int) -> tuple[int, float]:
        now = time.time()
        # One statement, its own transaction: the write lock (and the flock around it) is held
        # for one step, not across BEGIN, SELECT, UPDATE and COMMIT. Each of those released the
        # GIL and had to win it back from the process's busy threads (up to 5 ms each) while
        # every other writer on the host waited.
        count, expires = conn.execute(_UPSERT, (key, amount, now + expiry, now, now)).fetchall()[0]
        if count == amount:
            # Expired windows of other keys are dropped now and then, so the file stays small.
            conn.execute("DELETE FROM counters WHERE expires <= ?", (now,))
        return int(count), float(expires)

    def _stored_count(self, key: str) -> int:
        """The key's count in its current window (0 when none)."""
        row = self._read("SELECT n FROM counters WHERE key = ? AND expires > ?", (key, time.time()))
        return int(row[0]) if row else 0

    def _stored_expiry(self, key: str) -> float:
        """When the key's window ends (epoch seconds; now when it has none)."""
        row = self._read("SELECT expires FROM counters WHERE key = ?", (key,))
        return float(row[0]) if row else time.time()

    def _read(self, sql: str, params: tuple) -> tuple | None:
        try:
            return self._connect().execute(sql, params).fetchone()
        except BaseException:
            self._drop()
            raise

    def check(self) -> bool:
        """True when the file can be read."""
        try:
            self._read("SELECT 1 FROM counters LIMIT 1", ())
            return True
        except sqlite3.Error:
            return False

    def _reset_stored(self) -> int | None:
        """Drop every counter; return how many there were."""
        try:
            with self._writing() as conn:
                return conn.execute("DELETE FROM counters").rowcount
        except BaseException:
            self._drop()
            raise

    def _clear_stored(self, key: str) -> None:
        """Drop one key's counter."""
        try:
            with self._writing() as conn:
                conn.execute("DELETE FROM counters WHERE key = ?", (key,))
        except BaseException:
            self._drop()
            raise
