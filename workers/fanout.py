"""The executor handed to ``service.engine.compute``: a batch runs here unless sharing pays.

The engine gives the executor a batch of chunk tasks (JSON dicts) and wants their results back
in the same order. A database round trip costs more than a small chunk, so:

* the orchestrating worker computes chunks itself, timing them, until the rest of the batch is
  estimated to take longer than ``split_seconds`` (and helpers are allowed);
* it then cuts the rest into *units* of about ``unit_seconds`` each (many engine chunks per
  unit), inserts them into ``chunk_results`` as 'pending' rows (tasks included) and publishes at
  most ``helpers`` helper tasks on the helper queue (``sizewise.helpers``);
* the orchestrator and the helpers claim pending units (a conditional UPDATE; a unit whose
  lease expired may be taken over), compute them and store their results; a helper leaves
  when no unit is left, when its job is no longer running, or when a request is waiting;
* the orchestrator merges the results in the engine's order, so the digits do not depend on
  who computed what, and the job's rows are deleted when the job ends (:func:`clear_units`).

A retried job (its previous worker died) reuses the units that were finished.
"""

from __future__ import annotations

import hashlib
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

UNIT_SECONDS = 0.25  # a unit long enough to dwarf its two database round trips
UNIT_LEASE_SECONDS = 15.0  # a dead helper's unit is taken over after this long


def task_key(task) -> str:
    """Return the SHA-256 hex digest of a task's (or a unit's task list's) canonical JSON."""
    return hashlib.sha256(canonical_json(task).encode("utf-8")).hexdigest()


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
    """Return {chunk task key: result} of the job's finished units (a retry reuses them)."""
    table = _table()
    out: dict[str, dict] = {}
    rows = session.execute(
        select(table.c.tasks, table.c.result).where(
            _job(job_kind, job_id), table.c.status == "done", table.c.tasks.is_not(None)
        )
    )
    for tasks, results in rows:
        for task, result in zip(tasks or [], results or [], strict=False):
            out[task_key(task)] = result
    return out


def add_units(session, job_kind: str, job_id: str, units: list[list[dict]]) -> list[str]:
    """Insert pending units; return their keys (a unit already stored keeps its row)."""
    table = _table()
    now = utcnow()
    keys = []
    for tasks in units:
        key = task_key(tasks)
        keys.append(key)
        try:
            with session.begin_nested():  # a savepoint, so a duplicate leaves the rest usable
                session.execute(
                    insert(table).values(
                        job_kind=jobs.job_kind(job_kind).unit_key,
                        job_id=job_id,
                        task_key=key,
                        status="pending",
                        tasks=tasks,
                        created_at=now,
                    )
                )
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
    keep_going: Callable[[], bool] | None = None,
) -> int:
    """Claim and compute the job's pending units until none is left; return how many were done.

    ``keep_going`` is asked before each claim; False stops the loop (e.g. a request is waiting).
    """
    done = 0
    while keep_going is None or keep_going():
        with session_scope(sessionmaker) as session:
            claimed = claim_unit(session, job_kind, job_id, owner, lease_seconds)
        if claimed is None:
            break
        key, tasks = claimed
        results = [runner(task) for task in tasks]
        with session_scope(sessionmaker) as session:
            store_unit(session, job_kind, job_id, key, results)
        metrics.WORK_UNITS.labels("helper").inc()
        done += 1
    return done


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
        heartbeat: Callable[[], None] | None = None,
        should_stop: Callable[[], bool] | None = None,
        runner: ChunkRunner = engine_run_chunk,
        order: Callable[[list[int]], list[int]] | None = None,
        poll_seconds: float = 0.02,
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
        self.heartbeat = heartbeat or (lambda: None)
        self.should_stop = should_stop or (lambda: False)
        self.runner = runner
        self.order = order
        self.poll_seconds = poll_seconds
        self.rate: float | None = None  # seconds per unit of _weight, measured here
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
        self.rate = rate if self.rate is None else 0.7 * self.rate + 0.3 * rate
        self.computed += 1
        return result

    def __call__(self, tasks: list[dict]) -> list[dict]:
        """Run a batch of chunk tasks and return their results in the batch's order."""
        if not tasks:
            return []
        keys = [task_key(t) for t in tasks]
        results: dict[str, dict] = {}
        if self.helpers and self.reused is None:
            # A retried job: the units its previous attempt finished are still in the table.
            with session_scope(self.sessionmaker) as session:
                self.reused = finished_units(session, self.job_kind, self.job_id)
        for key in keys:
            if self.reused and key in self.reused:
                results[key] = self.reused[key]
        first: dict[str, int] = {}
        for index, key in enumerate(keys):
            if key not in results:
                first.setdefault(key, index)  # identical tasks are computed once
        pending = list(first.values())
        if self.order:
            pending = self.order(list(pending))
        while pending:
            self._check_stop()
            if self.helpers and self.rate is not None and len(pending) > 1:
                estimate = self.rate * sum(_weight(tasks[i]) for i in pending)
                if estimate > self.split_seconds:
                    self._share([tasks[i] for i in pending], results)
                    break
            index = pending.pop(0)
            results[keys[index]] = self._run_local(tasks[index])
            self.heartbeat()
        return [results[k] for k in keys]

    def _units(self, tasks: list[dict]) -> list[list[dict]]:
        """Cut tasks, in order, into units of about ``unit_seconds`` each."""
        target = self.unit_seconds / max(self.rate or 1e-9, 1e-12)
        units: list[list[dict]] = [[]]
        weight = 0.0
        for task in tasks:
            if units[-1] and weight + _weight(task) > target:
                units.append([])
                weight = 0.0
            units[-1].append(task)
            weight += _weight(task)
        return units

    def _share(self, tasks: list[dict], results: dict[str, dict]) -> None:
        units = self._units(tasks)
        with session_scope(self.sessionmaker) as session:
            unit_keys = add_units(session, self.job_kind, self.job_id, units)
        self.units += len(units)
        if len(units) > 1:
            self.publish_helpers(min(self.helpers, len(units) - 1))
        mine: set[str] = set()
        pending = dict(zip(unit_keys, units, strict=True))
        while pending:
            self._check_stop()
            with session_scope(self.sessionmaker) as session:
                claimed = claim_unit(
                    session, self.job_kind, self.job_id, self.owner, self.unit_lease
                )
            if claimed is not None:
                key, unit = claimed
                unit_results = [self._run_local(task) for task in unit]
                with session_scope(self.sessionmaker) as session:
                    store_unit(session, self.job_kind, self.job_id, key, unit_results)
                mine.add(key)
                metrics.WORK_UNITS.labels("orchestrator").inc()
                self.heartbeat()
            with session_scope(self.sessionmaker) as session:
                states = _unit_states(session, self.job_kind, self.job_id, list(pending))
            for key in list(pending):
                status, unit_results, _expired = states.get(key, (None, None, True))
                if status == "done":
                    for task, result in zip(pending.pop(key), unit_results, strict=True):
                        results[task_key(task)] = result
                    if key not in mine:
                        self.units_by_others += 1
                elif status is None:
                    # The row vanished (a cleanup raced us): put it back and carry on.
                    with session_scope(self.sessionmaker) as session:
                        add_units(session, self.job_kind, self.job_id, [pending[key]])
            if pending and claimed is None:
                # Others hold the rest: wait for them (their leases expire if they died).
                self.heartbeat()
                time.sleep(self.poll_seconds)


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
