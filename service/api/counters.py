"""Rate-limit counters in a SQLite file, shared by every API process on one host.

The embedded default runs several gunicorn workers and no Redis; counters in each process's
memory would let a caller make the configured rate once per process. This ``limits`` storage
keeps the fixed-window counters in one SQLite file instead (``sizewise+sqlite:///path``); each
increment is one ``BEGIN IMMEDIATE`` transaction, so concurrent processes count exactly.
"""

from __future__ import annotations

import os
import sqlite3
import time
from pathlib import Path

from limits.storage import Storage

SCHEME = "sizewise+sqlite"
_TABLE = "CREATE TABLE IF NOT EXISTS counters (key TEXT PRIMARY KEY, n INTEGER, expires REAL)"


class SqliteFileStorage(Storage):
    """Fixed-window counters in a SQLite file (the file is created 0600)."""

    STORAGE_SCHEME = [SCHEME]

    def __init__(self, uri: str | None = None, wrap_exceptions: bool = False, **options):
        super().__init__(uri, wrap_exceptions=wrap_exceptions, **options)
        self.path = Path((uri or "").split("://", 1)[1])
        self.path.parent.mkdir(parents=True, exist_ok=True)
        if not self.path.exists():
            os.close(os.open(self.path, os.O_WRONLY | os.O_CREAT, 0o600))
        with self._connect() as conn:
            conn.execute(_TABLE)

    @property
    def base_exceptions(self) -> type[Exception]:
        return sqlite3.Error

    def _connect(self) -> sqlite3.Connection:
        conn = sqlite3.connect(self.path, timeout=10, isolation_level=None)
        conn.execute("PRAGMA busy_timeout=10000")
        return conn

    def incr(self, key: str, expiry: float, amount: int = 1) -> int:
        """Add ``amount`` to the key's count (a new window when it expired) and return the count."""
        now = time.time()
        conn = self._connect()
        try:
            conn.execute("BEGIN IMMEDIATE")
            row = conn.execute("SELECT n, expires FROM counters WHERE key = ?", (key,)).fetchone()
            if row is None or row[1] <= now:
                count = amount
                conn.execute(
                    "INSERT OR REPLACE INTO counters (key, n, expires) VALUES (?, ?, ?)",
                    (key, count, now + expiry),
                )
            else:
                count = row[0] + amount
                conn.execute("UPDATE counters SET n = ? WHERE key = ?", (count, key))
            if count == amount:
                # Expired windows of other keys are dropped now and then, so the file stays small.
                conn.execute("DELETE FROM counters WHERE expires <= ?", (now,))
            conn.execute("COMMIT")
            return count
        except BaseException:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            raise
        finally:
            conn.close()

    def get(self, key: str) -> int:
        """The key's count in its current window (0 when none)."""
        conn = self._connect()
        try:
            row = conn.execute(
                "SELECT n FROM counters WHERE key = ? AND expires > ?", (key, time.time())
            ).fetchone()
        finally:
            conn.close()
        return int(row[0]) if row else 0

    def get_expiry(self, key: str) -> float:
        """When the key's window ends (epoch seconds; now when it has none)."""
        conn = self._connect()
        try:
            row = conn.execute("SELECT expires FROM counters WHERE key = ?", (key,)).fetchone()
        finally:
            conn.close()
        return float(row[0]) if row else time.time()

    def check(self) -> bool:
        """True when the file can be read."""
        try:
            conn = self._connect()
            conn.execute("SELECT 1 FROM counters LIMIT 1")
            conn.close()
            return True
        except sqlite3.Error:
            return False

    def reset(self) -> int | None:
        """Drop every counter; return how many there were."""
        conn = self._connect()
        try:
            return conn.execute("DELETE FROM counters").rowcount
        finally:
            conn.close()

    def clear(self, key: str) -> None:
        """Drop one key's counter."""
        conn = self._connect()
        try:
            conn.execute("DELETE FROM counters WHERE key = ?", (key,))
        finally:
            conn.close()
