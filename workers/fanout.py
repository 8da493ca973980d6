"""The chunk executor handed to ``service.engine.compute``: one batch, many workers, no ``.get()``.

The engine gives the executor a batch of chunk tasks (JSON dicts) and wants their results back
in the same order. Each task is identified by ``task_key = sha256(canonical_json(task))`` and
tracked in the ``chunk_results`` table, one row per (job_kind, job_id, task_key):

* a row is *claimed* by a conditional insert (no row yet) or a conditional update (status
  ``running`` with an expired lease); only the claimer computes it;
* the claimer stores the result and sets status ``done``; chunks are pure, so a chunk redone
  after a lost lease writes the same result;
* when a batch has more than one chunk, the orchestrator publishes ``sizewise.run_chunk`` for
  each missing chunk, then works through the batch itself; when only chunks claimed by other
  workers remain it polls the table (renewing its own job lease) until they are done or their
  lease expires, in which case it takes them over.

Results are merged in the engine's order, so the digits do not depend on how many workers
helped or in which order the chunks finished.
"""

from __future__ import annotations

import hashlib
import logging
import time
from collections.abc import Callable, Iterable
from datetime import UTC, datetime, timedelta

from sqlalchemy import and_, insert, or_, select, update
from sqlalchemy.exc import IntegrityError

from service.engine import Cancelled, canonical_json
from service.engine import run_chunk as engine_run_chunk
from service.store.db import session_scope

log = logging.getLogger(__name__)

ChunkRunner = Callable[[dict], dict]
Publisher = Callable[[str, str, dict], bool]


def utcnow() -> datetime:
    """Return the current time as a timezone-aware UTC datetime."""
    return datetime.now(UTC)


def task_key(task: dict) -> str:
    """Return the SHA-256 hex digest of the task's canonical JSON (its identity in chunk_results)."""
    return hashlib.sha256(canonical_json(task).encode("utf-8")).hexdigest()


def _chunks_table():
    """The ``chunk_results`` table from the store's metadata (the contract names it)."""
    from service.store import models

    return models.Base.metadata.tables["chunk_results"]


def claim_chunk(
    session, *, job_kind: str, job_id: str, key: str, owner: str, lease_seconds: float
) -> tuple[str, dict | None]:
    """Try to claim one chunk; return ('claimed', None), ('done', result) or ('busy', None)."""
    table = _chunks_table()
    now = utcnow()
    expires = now + timedelta(seconds=lease_seconds)
    where = and_(table.c.job_kind == job_kind, table.c.job_id == job_id, table.c.task_key == key)
    row = session.execute(select(table.c.status, table.c.result).where(where)).first()
    if row is None:
        try:
            # A savepoint, so a lost insert race leaves the caller's transaction usable.
            with session.begin_nested():
                session.execute(
                    insert(table).values(
                        job_kind=job_kind,
                        job_id=job_id,
                        task_key=key,
                        status="running",
                        lease_owner=owner,
                        lease_expires_at=expires,
                        created_at=now,
                    )
                )
        except IntegrityError:
            return "busy", None
        return "claimed", None
    if row.status == "done":
        return "done", row.result
    taken = session.execute(
        update(table)
        .where(
            where,
            table.c.status == "running",
            or_(table.c.lease_expires_at.is_(None), table.c.lease_expires_at < now),
        )
        .values(lease_owner=owner, lease_expires_at=expires)
    )
    return ("claimed", None) if taken.rowcount == 1 else ("busy", None)


def store_chunk(session, *, job_kind: str, job_id: str, key: str, result: dict) -> None:
    """Store a computed chunk result and mark the row done (a second identical write is a no-op)."""
    table = _chunks_table()
    session.execute(
        update(table)
        .where(
            table.c.job_kind == job_kind,
            table.c.job_id == job_id,
            table.c.task_key == key,
            table.c.status != "done",
        )
        .values(status="done", result=result, finished_at=utcnow(), lease_expires_at=None)
    )


def _states(session, *, job_kind: str, job_id: str, keys: Iterable[str]) -> dict[str, tuple]:
    """Return {task_key: (status, result, lease_expired)} for the given keys that have a row."""
    table = _chunks_table()
    now = utcnow()
    out: dict[str, tuple] = {}
    keys = list(keys)
    # Bounded IN lists keep the statement small for large batches.
    for start in range(0, len(keys), 500):
        part = keys[start : start + 500]
        expired = or_(table.c.lease_expires_at.is_(None), table.c.lease_expires_at < now)
        rows = session.execute(
            select(
                table.c.task_key, table.c.status, table.c.result, expired.label("expired")
            ).where(
                table.c.job_kind == job_kind, table.c.job_id == job_id, table.c.task_key.in_(part)
            )
        )
        for row in rows:
            out[row.task_key] = (row.status, row.result, bool(row.expired))
    return out


def run_one(
    sessionmaker,
    *,
    job_kind: str,
    job_id: str,
    task: dict,
    owner: str,
    lease_seconds: float,
    runner: ChunkRunner = engine_run_chunk,
) -> str:
    """Claim, compute and store one chunk; return 'computed', 'done' (already) or 'busy'."""
    key = task_key(task)
    with session_scope(sessionmaker) as session:
        state, _ = claim_chunk(
            session,
            job_kind=job_kind,
            job_id=job_id,
            key=key,
            owner=owner,
            lease_seconds=lease_seconds,
        )
    if state != "claimed":
        return state
    result = runner(task)
    with session_scope(sessionmaker) as session:
        store_chunk(session, job_kind=job_kind, job_id=job_id, key=key, result=result)
    return "computed"


class ChunkExecutor:
    """An ``executor`` for ``compute()`` that shares each batch with other workers via the table."""

    def __init__(
        self,
        sessionmaker,
        *,
        job_kind: str,
        job_id: str,
        owner: str,
        lease_seconds: float,
        publish: Publisher | None = None,
        heartbeat: Callable[[], None] | None = None,
        should_stop: Callable[[], bool] | None = None,
        runner: ChunkRunner = engine_run_chunk,
        order: Callable[[list[int]], list[int]] | None = None,
        poll_seconds: float = 0.2,
    ):
        self.sessionmaker = sessionmaker
        self.job_kind = job_kind
        self.job_id = job_id
        self.owner = owner
        self.lease_seconds = lease_seconds
        self.publish = publish
        self.heartbeat = heartbeat or (lambda: None)
        self.should_stop = should_stop or (lambda: False)
        self.runner = runner
        self.order = order
        self.poll_seconds = poll_seconds
        self.computed = 0  # chunks this executor computed itself (reported in logs and tests)

    def _check_stop(self) -> None:
        """Raise Cancelled when the job's cancel flag is set (checked between chunks)."""
        if self.should_stop():
            raise Cancelled(f"{self.job_kind} {self.job_id} cancelled between chunks")

    def __call__(self, tasks: list[dict]) -> list[dict]:
        """Run a batch of chunk tasks and return their results in the batch's order."""
        if not tasks:
            return []
        if len(tasks) == 1 and self.publish is None:
            self._check_stop()
            return [self.runner(tasks[0])]
        keys = [task_key(t) for t in tasks]
        by_key: dict[str, int] = {}
        for index, key in enumerate(keys):
            by_key.setdefault(key, index)  # identical tasks share one row and one result
        results: dict[str, dict] = {}

        with session_scope(self.sessionmaker) as session:
            known = _states(session, job_kind=self.job_kind, job_id=self.job_id, keys=by_key)
        for key, (status, result, _) in known.items():
            if status == "done":
                results[key] = result
        if self.publish is not None and len(by_key) > 1:
            for key, index in by_key.items():
                if key not in known:
                    self.publish(self.job_kind, self.job_id, tasks[index])

        pending = [by_key[k] for k in by_key if k not in results]
        while pending:
            self._check_stop()
            visit = self.order(list(pending)) if self.order else list(pending)
            for index in visit:
                key = keys[index]
                if key in results:
                    continue
                self._check_stop()
                with session_scope(self.sessionmaker) as session:
                    state, result = claim_chunk(
                        session,
                        job_kind=self.job_kind,
                        job_id=self.job_id,
                        key=key,
                        owner=self.owner,
                        lease_seconds=self.lease_seconds,
                    )
                if state == "done":
                    results[key] = result
                elif state == "claimed":
                    result = self.runner(tasks[index])
                    with session_scope(self.sessionmaker) as session:
                        store_chunk(
                            session,
                            job_kind=self.job_kind,
                            job_id=self.job_id,
                            key=key,
                            result=result,
                        )
                    results[key] = result
                    self.computed += 1
                    self.heartbeat()
            pending = [i for i in pending if keys[i] not in results]
            if pending:
                pending = self._wait(pending, keys, results)
        return [results[k] for k in keys]

    def _wait(self, pending: list[int], keys: list[str], results: dict[str, dict]) -> list[int]:
        """Poll until another worker finishes a pending chunk or a lease expires; return the rest."""
        while True:
            self._check_stop()
            self.heartbeat()
            time.sleep(self.poll_seconds)
            with session_scope(self.sessionmaker) as session:
                states = _states(
                    session,
                    job_kind=self.job_kind,
                    job_id=self.job_id,
                    keys={keys[i] for i in pending},
                )
            takeover = False
            for index in pending:
                status, result, expired = states.get(keys[index], (None, None, True))
                if status == "done":
                    results[keys[index]] = result
                elif expired:
                    takeover = True  # a missing row or a dead worker's lease: take it back
            rest = [i for i in pending if keys[i] not in results]
            if not rest or takeover:
                return rest
