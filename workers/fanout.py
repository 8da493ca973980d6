"""The executor handed to ``service.engine.compute``: a batch runs here unless sharing pays.

The engine gives the executor a batch of chunk tasks (JSON dicts) and wants their results back
in the same order. A database round trip costs more than a small chunk, so:

* the orchestrating worker computes chunks itself, timing them (a few chunks at least, the
  fastest one giving the speed), until the rest of the batch is estimated to take longer than
  ``split_seconds`` (and helpers are allowed);
* it then cuts the rest into *units* of decreasing size (guided self-scheduling: each unit
  about 1/(2·workers) of what is left, between ``min_unit_seconds`` and ``unit_seconds``, so
  the first units are long and the last ones even out the finish), inserts them into
  ``chunk_results`` as 'pending' rows (tasks included) in one statement and publishes at most
  ``helpers`` helper tasks on the helper queue (``sizewise.helpers``);
* the orchestrator and the helpers claim pending units (a conditional UPDATE; a unit whose
  lease expired may be taken over) and compute them; a unit's results are stored in the same
  transaction that claims the next unit, so a unit costs one round trip; a helper leaves when
  no unit is left, when its job is no longer running, or when a request is waiting;
* the orchestrator merges the results in the engine's order, so the digits do not depend on
  who computed what, and the job's rows are deleted when the job ends (:func:`clear_units`).

A retried job (its previous worker died) reuses the units that were finished.
"""

from __future__ import annotations

import hashlib
import json
import logging
import time
from collections.abc import Callable
from datetime import timedelta

from sqlalchemy import and_, delete, insert, or_, select, update
from sqlalchemy.exc import IntegrityError

from service import metrics
from service.engine import Cancelled, canonical_json
from service.engine import run_chunk as engine_run_chunk
from service.store import jobs
from service.store.db import session_scope
from service.store.types import utcnow

log = logging.getLogger(__name__)

ChunkRunner = Callable[[dict], dict]
HelperPublisher = Callable[[int], int]
KeepGoing = Callable[[object], bool]  # asked with the open session before each claim

# Between two units a worker spends one transaction (tens of ms when the machine is busy), so
# units are long, and shorter only towards the end.
UNIT_SECONDS = 0.5  # the longest unit: a waiting request or a cancel waits at most this much
MIN_UNIT_SECONDS = 0.05  # the shortest: still longer than the transaction around it
# The speed is measured on a few chunks (or on this much compute) before a batch is split.
PROBE_CHUNKS = 3
PROBE_SECONDS = 0.05
UNIT_LEASE_SECONDS = 15.0  # a dead helper's unit is taken over after this long


def _text(task) -> str:
    """The canonical JSON of a task (``canonical_json``), fast for tasks already plain JSON."""
    try:
        return json.dumps(
            task, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
        )
    except (TypeError, ValueError):  # numpy scalars, tuples as keys, NaN: the full conversion
        return canonical_json(task)


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def task_key(task) -> str:
    """Return the SHA-256 hex digest of a task's (or a unit's task list's) canonical JSON."""
    return _digest(_text(task))


def _unit_key(texts: list[str]) -> str:
    """``task_key`` of a unit's task list, from its tasks' canonical JSON (no second pass)."""
    return _digest("[" + ",".join(texts) + "]")


def _table():
    """The ``chunk_results`` table from the store's metadata (the contract names it)."""
    from service.store import models

    return models.Base.metadata.tables["chunk_results"]


def _weight(task: dict) -> float:
    """Relative cost of a chunk: replicates times observations per replicate."""
    per_group = task.get("per_group") or [1]
    try:
        size = sum(int(n) for n in per_group)
    except (TypeError, ValueError):
        size = 1
    return float(task.get("replicates") or 1) * max(size, 1)


def _job(job_kind: str, job_id: str):
    table = _table()
    return and_(table.c.job_kind == jobs.job_kind(job_kind).unit_key, table.c.job_id == job_id)


def clear_units(session, job_kind: str, job_id: str) -> int:
    """Delete every unit row of a job (called when the job ends); return how many."""
    return session.execute(delete(_table()).where(_job(job_kind, job_id))).rowcount


def finished_units(session, job_kind: str, job_id: str) -> dict[str, dict]:
    """Return {chunk task's canonical JSON: result} of the job's finished units (a retry reuses
    them)."""
    table = _table()
    out: dict[str, dict] = {}
    rows = session.execute(
        select(table.c.tasks, table.c.result).where(
            _job(job_kind, job_id), table.c.status == "done", table.c.tasks.is_not(None)
        )
    )
    for tasks, results in rows:
        for task, result in zip(tasks or [], results or [], strict=False):
            out[_text(task)] = result
    return out


def add_units(
    session, job_kind: str, job_id: str, units: list[list[dict]], keys: list[str] | None = None
) -> list[str]:
    """Insert pending units in one statement; return their keys (a unit already stored keeps its
    row). ``keys`` are the units' ``task_key``s when the caller has them."""
    table = _table()
    now = utcnow()
    keys = keys if keys is not None else [task_key(tasks) for tasks in units]
    rows = [
        {
            "job_kind": jobs.job_kind(job_kind).unit_key,
            "job_id": job_id,
            "task_key": key,
            "status": "pending",
            "tasks": tasks,
            "created_at": now,
        }
        for key, tasks in zip(keys, units, strict=True)
    ]
    if not rows:
        return keys
    dialect = session.get_bind().dialect.name
    if dialect in ("postgresql", "sqlite"):
        if dialect == "postgresql":
            from sqlalchemy.dialects.postgresql import insert as upsert
        else:
            from sqlalchemy.dialects.sqlite import insert as upsert
        unique = [table.c.job_kind, table.c.job_id, table.c.task_key]
        session.execute(upsert(table).on_conflict_do_nothing(index_elements=unique), rows)
        return keys
    for row in rows:  # other databases: a savepoint per row, so a duplicate leaves the rest
        try:
            with session.begin_nested():
                session.execute(insert(table).values(**row))
        except IntegrityError:
            pass
    return keys


def claim_unit(
    session, job_kind: str, job_id: str, owner: str, lease_seconds: float
) -> tuple[str, list[dict]] | None:
    """Claim one pending unit of the job (or one whose lease expired); None when none is left."""
    table = _table()
    for _ in range(5):  # another worker may win the row between our read and our update
        now = utcnow()
        claimable = or_(
            table.c.status == "pending",
            and_(table.c.status == "running", table.c.lease_expires_at < now),
        )
        row = session.execute(
            select(table.c.id, table.c.task_key, table.c.tasks, table.c.lease_expires_at)
            .where(_job(job_kind, job_id), claimable, table.c.tasks.is_not(None))
            .order_by(table.c.id)
            .limit(1)
        ).first()
        if row is None:
            return None
        taken = session.execute(
            update(table)
            .where(
                table.c.id == row.id,
                or_(
                    table.c.status == "pending",
                    and_(table.c.status == "running", table.c.lease_expires_at < now),
                ),
            )
            .values(
                status="running",
                lease_owner=owner,
                lease_expires_at=now + timedelta(seconds=lease_seconds),
            )
        ).rowcount
        if taken == 1:
            return row.task_key, row.tasks
    return None


def store_unit(session, job_kind: str, job_id: str, key: str, results: list[dict]) -> None:
    """Store a unit's results and mark it done (units are pure: a second write changes nothing)."""
    table = _table()
    session.execute(
        update(table)
        .where(_job(job_kind, job_id), table.c.task_key == key, table.c.status != "done")
        .values(status="done", result=results, finished_at=utcnow(), lease_expires_at=None)
    )


def _unit_states(session, job_kind: str, job_id: str, keys: list[str]) -> dict[str, tuple]:
    """Return {key: (status, result, lease expired)} for the given unit keys."""
    table = _table()
    now = utcnow()
    expired = or_(table.c.lease_expires_at.is_(None), table.c.lease_expires_at < now)
    out = {}
    for start in range(0, len(keys), 500):
        rows = session.execute(
            select(
                table.c.task_key, table.c.status, table.c.result, expired.label("expired")
            ).where(_job(job_kind, job_id), table.c.task_key.in_(keys[start : start + 500]))
        )
        for row in rows:
            out[row.task_key] = (row.status, row.result, bool(row.expired))
    return out


def work_units(
    sessionmaker,
    *,
    job_kind: str,
    job_id: str,
    owner: str,
    runner: ChunkRunner = engine_run_chunk,
    lease_seconds: float = UNIT_LEASE_SECONDS,
    keep_going: KeepGoing | None = None,
) -> int:
    """Claim and compute the job's pending units until none is left; return how many were done.

    One transaction per unit: it stores the previous unit's results, asks ``keep_going`` (with
    the session; False stops the loop, e.g. a request is waiting) and claims the next unit.
    """
    done = 0
    finished: tuple[str, list[dict]] | None = None
    while True:
        with session_scope(sessionmaker) as session:
            if finished is not None:
                store_unit(session, job_kind, job_id, *finished)
                finished = None
            claimed = None
            if keep_going is None or keep_going(session):
                claimed = claim_unit(session, job_kind, job_id, owner, lease_seconds)
        if claimed is None:
            return done
        key, tasks = claimed
        finished = (key, [runner(task) for task in tasks])
        metrics.WORK_UNITS.labels("helper").inc()
        done += 1


class ChunkExecutor:
    """An ``executor`` for ``compute()``: runs a batch itself, shares it only when that pays."""

    def __init__(
        self,
        sessionmaker,
        *,
        job_kind: str,
        job_id: str,
        owner: str,
        lease_seconds: float,
        publish_helpers: HelperPublisher | None = None,
        helpers: int = 0,
        split_seconds: float = 1.0,
        unit_seconds: float = UNIT_SECONDS,
        min_unit_seconds: float = MIN_UNIT_SECONDS,
        heartbeat: Callable[[], None] | None = None,
        should_stop: Callable[[], bool] | None = None,
        runner: ChunkRunner = engine_run_chunk,
        order: Callable[[list[int]], list[int]] | None = None,
        poll_seconds: float = 0.01,
    ):
        self.sessionmaker = sessionmaker
        self.job_kind = job_kind
        self.job_id = job_id
        self.owner = owner
        self.unit_lease = min(float(lease_seconds), UNIT_LEASE_SECONDS)
        self.publish_helpers = publish_helpers
        self.helpers = max(int(helpers), 0) if publish_helpers is not None else 0
        self.split_seconds = float(split_seconds)
        self.unit_seconds = float(unit_seconds)
        self.min_unit_seconds = float(min_unit_seconds)
        self.heartbeat = heartbeat or (lambda: None)
        self.should_stop = should_stop or (lambda: False)
        self.runner = runner
        self.order = order
        self.poll_seconds = poll_seconds
        self.rate: float | None = None  # seconds per unit of _weight: the fastest chunk here
        self.local_seconds = 0.0  # time spent computing chunks here
        self.reused: dict[str, dict] | None = None
        self.computed = 0  # chunks this executor computed itself
        self.units = 0  # units this job was split into
        self.units_by_others = 0  # units another worker computed

    def _check_stop(self) -> None:
        """Raise Cancelled when the job's cancel flag is set (checked between chunks)."""
        if self.should_stop():
            raise Cancelled(f"{self.job_kind} {self.job_id} cancelled between chunks")

    def _run_local(self, task: dict) -> dict:
        started = time.perf_counter()
        result = self.runner(task)
        elapsed = time.perf_counter() - started
        rate = elapsed / _weight(task)
        # The fastest chunk: a process's first chunk can take ten times longer than the next
        # (cold caches, a preemption), and units cut from that rate were a few ms each.
        self.rate = rate if self.rate is None else min(self.rate, rate)
        self.local_seconds += elapsed
        self.computed += 1
        return result

    def _measured(self) -> bool:
        """True once the speed is known well enough to plan units from it."""
        return self.rate is not None and (
            self.computed >= PROBE_CHUNKS or self.local_seconds >= PROBE_SECONDS
        )

    def __call__(self, tasks: list[dict]) -> list[dict]:
        """Run a batch of chunk tasks and return their results in the batch's order."""
        if not tasks:
            return []
        texts = [_text(t) for t in tasks]  # canonical JSON: identical tasks, reuse, unit keys
        results: dict[str, dict] = {}
        if self.helpers and self.reused is None:
            # A retried job: the units its previous attempt finished are still in the table.
            with session_scope(self.sessionmaker) as session:
                self.reused = finished_units(session, self.job_kind, self.job_id)
        for text in texts:
            if self.reused and text in self.reused:
                results[text] = self.reused[text]
        first: dict[str, int] = {}
        for index, text in enumerate(texts):
            if text not in results:
                first.setdefault(text, index)  # identical tasks are computed once
        pending = list(first.values())
        if self.order:
            pending = self.order(list(pending))
        while pending:
            self._check_stop()
            if self.helpers and len(pending) > 1 and self._measured():
                estimate = self.rate * sum(_weight(tasks[i]) for i in pending)
                if estimate > self.split_seconds:
                    self._share([(tasks[i], texts[i]) for i in pending], results)
                    break
            index = pending.pop(0)
            results[texts[index]] = self._run_local(tasks[index])
            self.heartbeat()
        return [results[text] for text in texts]

    def _units(self, tasks: list[tuple[dict, str]]) -> list[list[tuple[dict, str]]]:
        """Cut tasks, in order, into units of decreasing size (see the module's docstring)."""
        rate = max(self.rate or 1e-9, 1e-12)
        share = 1.0 / (2 * (self.helpers + 1))
        left = sum(_weight(task) for task, _ in tasks)
        units: list[list[tuple[dict, str]]] = []
        weight = target = 0.0
        for task, text in tasks:
            w = _weight(task)
            if not units or (units[-1] and weight + w > target):
                seconds = min(self.unit_seconds, max(self.min_unit_seconds, left * rate * share))
                target = seconds / rate
                units.append([])
                weight = 0.0
            units[-1].append((task, text))
            weight += w
            left -= w
        return units

    def _share(self, tasks: list[tuple[dict, str]], results: dict[str, dict]) -> None:
        cut = self._units(tasks)
        units = [[task for task, _ in unit] for unit in cut]
        keys = [_unit_key([text for _, text in unit]) for unit in cut]
        texts = dict(zip(keys, ([text for _, text in unit] for unit in cut), strict=True))
        with session_scope(self.sessionmaker) as session:
            add_units(session, self.job_kind, self.job_id, units, keys)
        self.units += len(units)
        if len(units) > 1:
            self.publish_helpers(min(self.helpers, len(units) - 1))
        pending = dict(zip(keys, units, strict=True))
        mine: set[str] = set()
        others = 0
        finished: tuple[str, list[dict]] | None = None  # stored with the next claim
        while pending:
            self._check_stop()
            states = None
            with session_scope(self.sessionmaker) as session:
                if finished is not None:
                    store_unit(session, self.job_kind, self.job_id, *finished)
                    finished = None
                claimed = claim_unit(
                    session, self.job_kind, self.job_id, self.owner, self.unit_lease
                )
                if claimed is None:
                    states = _unit_states(session, self.job_kind, self.job_id, list(pending))
            if claimed is not None:
                key, unit = claimed
                unit_results = [self._run_local(task) for task in unit]
                finished = (key, unit_results)
                if pending.pop(key, None) is not None:
                    results.update(zip(texts[key], unit_results, strict=True))
                    mine.add(key)
                metrics.WORK_UNITS.labels("orchestrator").inc()
                self.heartbeat()
                continue
            for key in list(pending):
                status, unit_results, _expired = states.get(key, (None, None, True))
                if status == "done":
                    results.update(zip(texts[key], unit_results, strict=True))
                    pending.pop(key)
                    others += 1
                elif status is None:
                    # The row vanished (a cleanup raced us): put it back and carry on.
                    with session_scope(self.sessionmaker) as session:
                        add_units(session, self.job_kind, self.job_id, [pending[key]], [key])
            if pending:
                # Others hold the rest: wait for them (their leases expire if they died).
                self.heartbeat()
                time.sleep(self.poll_seconds)
        if finished is not None:
            with session_scope(self.sessionmaker) as session:
                store_unit(session, self.job_kind, self.job_id, *finished)
        self.units_by_others += others
        log.info(
            "%s %s: a batch split into %d units: %d computed here, %d by other workers",
            self.job_kind,
            self.job_id,
            len(units),
            len(mine),
            others,
        )


def clear_orphan_units(session) -> int:
    """Delete the unit rows of jobs that are no longer waiting or running (the sweeper's chore)."""
    table = _table()
    gone = 0
    for job in jobs.JOB_KINDS.values():
        model = job.model
        live = select(model.id).where(model.status.in_((*job.queued, "running")))
        gone += session.execute(
            delete(table).where(table.c.job_kind == job.unit_key, table.c.job_id.not_in(live))
        ).rowcount
    return gone
