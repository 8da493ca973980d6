"""Job bookkeeping shared by the API, the workers and the sweeper (requests, reruns, explorations).

A job is a row in ``requests`` (job 'request'), ``reruns`` (job 'rerun') or ``analyses`` (job
'exploration'), each with the lease columns of ``models.Leased``. Workers hold a lease
(lease_owner, lease_expires_at) while they run one; every change here is a conditional UPDATE
so two workers can never both own a job. Functions take a session and never commit.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import and_, false, or_, select, true, update
from sqlalchemy.orm import Session

from service.engine.records import canonical_json, differences, record_hash

from .audit import append_event, content_hash
from .models import Exploration, Leased, Request, Rerun, Result
from .types import utcnow

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class JobKind:
    """What differs between the jobs: their row, waiting statuses and bookkeeping columns."""

    name: str  # the word of logs, metrics, audit events and task messages
    model: type[Leased]
    queued: tuple[str, ...]  # statuses a worker may claim from
    stamp: str  # the column holding when the job was asked for
    unit_key: str  # chunk_results.job_kind of its work units (stored name, see models)
    has_status_events: bool = False  # only a request's status is followed by audit verify
    has_updated_at: bool = False
    has_finished_at: bool = False
    has_progress: bool = False
    cancellable: bool = False
    needs_result: bool = False  # runs only once its request has a result

    def touch(self, now: datetime) -> dict:
        """Bookkeeping columns written with every change of the job's row."""
        return {"updated_at": now} if self.has_updated_at else {}

    def status_detail(self, status: str) -> dict:
        """The audit detail naming the status, for jobs whose status the verification follows."""
        return {"status": status} if self.has_status_events else {}


JOB_KINDS: dict[str, JobKind] = {
    kind.name: kind
    for kind in (
        JobKind(
            "request",
            Request,
            queued=("received", "queued"),
            stamp="submitted_at",
            unit_key="request",
            has_status_events=True,
            has_updated_at=True,
            has_progress=True,
            cancellable=True,
        ),
        JobKind(
            "rerun",
            Rerun,
            queued=("queued",),
            stamp="requested_at",
            unit_key="rerun",
            has_finished_at=True,
        ),
        JobKind(
            "exploration",
            Exploration,
            queued=("queued",),
            stamp="created_at",
            unit_key="analysis",
            has_finished_at=True,
            needs_result=True,
        ),
    )
}
JOB_NAMES = tuple(JOB_KINDS)


def job_kind(name: str) -> JobKind:
    """The JobKind called ``name``; ValueError naming the jobs there are otherwise."""
    try:
        return JOB_KINDS[name]
    except KeyError:
        raise ValueError(f"job must be one of {', '.join(JOB_NAMES)}; got {name!r}") from None


def _request_id(session: Session, kind: str, job_id: str) -> str | None:
    if kind == "request":
        return job_id
    model = job_kind(kind).model
    return session.scalar(select(model.request_id).where(model.id == job_id))


def _event(session: Session, kind: str, job_id: str, actor: str, action: str, **detail) -> None:
    """Append a job event; an event that sets a request's status names it (audit verify reads it)."""
    append_event(
        session,
        request_id=_request_id(session, kind, job_id),
        actor=actor,
        action=action,
        detail={"job": kind, "job_id": job_id, **detail},
    )


def _update_ours(session: Session, kind: str, job_id: str, owner: str, **values) -> int:
    # The one guard of every lease-holder's write: still running, still our lease.
    model = job_kind(kind).model
    return session.execute(
        update(model)
        .where(model.id == job_id, model.status == "running", model.lease_owner == owner)
        .values(**values)
    ).rowcount


def mark_published(session: Session, kind: str, job_id: str) -> bool:
    """Record that the job's task reached the broker (the outbox marker); False if no such job.

    Only the first publish writes a 'published' event (and moves a request to 'queued').
    """
    job = job_kind(kind)
    model = job.model
    now = utcnow()
    row = session.execute(select(model.published_at).where(model.id == job_id)).first()
    if row is None:
        return False
    values: dict = {"published_at": now, **job.touch(now)}
    session.execute(update(model).where(model.id == job_id).values(**values))
    if row.published_at is not None:
        # A republish (lost message, dead worker) changes nothing a reader of the trail needs:
        # the next claim writes its own event. One 'published' event per job, not per sweep.
        return True
    status = {}
    if model is Request:
        # Only a job nobody has picked up yet moves from received to queued.
        queued = session.execute(
            update(Request)
            .where(Request.id == job_id, Request.status == "received")
            .values(status="queued")
        ).rowcount
        if queued:
            status = {"status": "queued"}
    _event(session, kind, job_id, "system", "published", **status)
    return True


def claim(
    session: Session, kind: str, job_id: str, owner: str, lease_seconds: float, max_attempts: int
) -> bool:
    """Take the job's lease if it is waiting or its lease expired; False when it is not ours.

    A job whose attempts are used up is marked failed with the reason instead; a request whose
    cancellation was asked for while its previous owner died is marked cancelled.
    """
    job = job_kind(kind)
    model = job.model
    now = utcnow()
    row = session.get(model, job_id, populate_existing=True)
    if row is None:
        return False
    claimable = or_(
        model.status.in_(job.queued),
        and_(model.status == "running", model.lease_expires_at < now),
    )
    guard = and_(model.id == job_id, claimable, model.attempts == row.attempts)
    if job.cancellable and row.cancel_requested:
        done = session.execute(
            update(model)
            .where(guard)
            .values(status="cancelled", lease_owner=None, lease_expires_at=None, updated_at=now)
        ).rowcount
        if done:
            _event(
                session,
                kind,
                job_id,
                owner,
                "cancelled",
                reason="cancel requested",
                status="cancelled",
            )
        return False
    if row.attempts + 1 > max_attempts:
        reason = f"gave up after {row.attempts} attempts (limit {max_attempts})"
        done = session.execute(
            update(model)
            .where(guard)
            .values(
                status="failed",
                error=reason,
                lease_owner=None,
                lease_expires_at=None,
                **job.touch(now),
            )
        ).rowcount
        if done:
            _event(
                session, kind, job_id, owner, "failed", error=reason, **job.status_detail("failed")
            )
        return False
    done = session.execute(
        update(model)
        .where(guard)
        .values(
            status="running",
            lease_owner=owner,
            lease_expires_at=now + timedelta(seconds=lease_seconds),
            attempts=row.attempts + 1,
            **job.touch(now),
        )
    ).rowcount
    # No event here: the worker appends its own "running" event with the attempt number.
    return bool(done)


def renew(
    session: Session,
    kind: str,
    job_id: str,
    owner: str,
    progress: float | None,
    lease_seconds: float,
) -> bool:
    """Extend our lease and store progress (0..1, requests only); False when the lease was lost."""
    job = job_kind(kind)
    now = utcnow()
    values: dict = {"lease_expires_at": now + timedelta(seconds=lease_seconds), **job.touch(now)}
    if job.has_progress and progress is not None:
        values["progress"] = min(max(float(progress), 0.0), 1.0)
    return bool(_update_ours(session, kind, job_id, owner, **values))


def cancel_requested(session: Session, kind: str, job_id: str) -> bool:
    """True when someone asked the running request to stop (reruns cannot be cancelled)."""
    if not job_kind(kind).cancellable:
        return False
    return bool(session.scalar(select(Request.cancel_requested).where(Request.id == job_id)))


def _record_sha(record: dict) -> str:
    stored = (record.get("reproducibility") or {}).get("record_sha256")
    if stored:
        return stored
    return record_hash(record)


def finish_request(
    session: Session,
    request_id: str,
    owner: str,
    record: dict,
    *,
    started_at: datetime | None = None,
    chunk_size: int | None = None,
) -> str | None:
    """Mark our request computed and store its result; return 'stored', 'identical', 'conflict'.

    Returns None when the lease is no longer ours (nothing is written). The first stored result
    wins: an identical second write is a no-op, a different one is appended to ``conflict``.
    """
    now = utcnow()
    taken = _update_ours(
        session,
        "request",
        request_id,
        owner,
        status="computed",
        progress=1.0,
        error=None,
        lease_owner=None,
        lease_expires_at=None,
        updated_at=now,
    )
    if taken != 1:
        return None
    sha = record["reproducibility"]["record_sha256"]
    existing = session.scalar(select(Result).where(Result.request_id == request_id))
    if existing is None:
        session.add(
            Result(
                request_id=request_id,
                record=record,
                record_sha256=sha,
                versions=record["reproducibility"].get("versions") or {},
                chunk_size=chunk_size,
                started_at=started_at,
                finished_at=now,
                duration_seconds=(now - started_at).total_seconds() if started_at else None,
            )
        )
        outcome = "stored"
    elif existing.record_sha256 == sha and canonical_json(existing.record) == canonical_json(
        record
    ):
        outcome = "identical"
    else:
        conflicts = existing.conflict if isinstance(existing.conflict, list) else []
        existing.conflict = [
            *conflicts,
            {
                "record_sha256": sha,
                "owner": owner,
                "at": now.isoformat(),
                "differences": differences(existing.record, record)[:50],
            },
        ]
        log.error(
            "request %s: a second, different result %s was not stored over %s",
            request_id,
            sha,
            existing.record_sha256,
        )
        outcome = "conflict"
    _event(
        session,
        "request",
        request_id,
        owner,
        "computed",
        record_sha256=sha,
        result=outcome,
        status="computed",
    )
    return outcome


def finish_rerun(
    session: Session,
    rerun_id: str,
    owner: str,
    record: dict,
    *,
    identical: bool,
    differences: list[str],
    env_rerun: dict,
) -> bool:
    """Store a rerun's record and its comparison with the original; False when the lease was lost."""
    now = utcnow()
    sha = _record_sha(record)
    done = _update_ours(
        session,
        "rerun",
        rerun_id,
        owner,
        status="done",
        record=record,
        record_sha256=sha,
        identical=identical,
        differences=list(differences),
        env_rerun=env_rerun,
        finished_at=now,
        lease_owner=None,
        lease_expires_at=None,
        error=None,
    )
    if done:
        _event(
            session,
            "rerun",
            rerun_id,
            owner,
            "rerun_done",
            identical=identical,
            differences=list(differences),
            record_sha256=record_hash(record),
        )
    return bool(done)


def fail(session: Session, kind: str, job_id: str, owner: str, error: str) -> bool:
    """Mark the job failed with ``error``; False when the lease was lost."""
    job = job_kind(kind)
    now = utcnow()
    values: dict = {
        "status": "failed",
        "error": error,
        "lease_owner": None,
        "lease_expires_at": None,
        **job.touch(now),
    }
    if job.has_finished_at:
        values["finished_at"] = now
    done = _update_ours(session, kind, job_id, owner, **values)
    if done:
        _event(session, kind, job_id, owner, "failed", error=error, **job.status_detail("failed"))
    return bool(done)


def cancel(session: Session, kind: str, job_id: str, owner: str) -> bool:
    """Mark our running request cancelled (the worker saw cancel_requested); False otherwise."""
    if not job_kind(kind).cancellable:
        raise ValueError("only requests can be cancelled; reruns and explorations run to the end")
    now = utcnow()
    done = _update_ours(
        session,
        kind,
        job_id,
        owner,
        status="cancelled",
        lease_owner=None,
        lease_expires_at=None,
        updated_at=now,
    )
    if done:
        _event(
            session, kind, job_id, owner, "cancelled", reason="cancel requested", status="cancelled"
        )
    return bool(done)


def stale_jobs(
    session: Session,
    now: datetime,
    *,
    grace_seconds: float = 0.0,
    republish_seconds: float | None = None,
) -> list[tuple[str, str, str | None]]:
    """Return (job, id, trace id) of jobs the sweeper must publish (again).

    Those are jobs never published, jobs running on an expired lease and, with
    ``republish_seconds``, jobs published that long ago and still not claimed: a broker that
    restarted without persistence has lost their message. A duplicate message is harmless, since
    only one worker can claim a job. ``grace_seconds`` skips unpublished jobs younger than that
    (the API may be publishing them). An exploration waits, unpublished, until its request has
    a result to explore (or has ended without one, so the worker can fail it with the reason).
    """
    cutoff = now - timedelta(seconds=grace_seconds)
    resend = None if republish_seconds is None else now - timedelta(seconds=republish_seconds)
    found: list[tuple[str, str, str | None]] = []
    for job in JOB_KINDS.values():
        model = job.model
        stamp = getattr(model, job.stamp)
        waiting = model.status.in_(job.queued)
        unpublished = and_(model.published_at.is_(None), waiting, stamp <= cutoff)
        query = select(model.id, model.trace_id)
        if job.needs_result:
            query = query.join(Request, Request.id == model.request_id).join(
                Result, Result.request_id == model.request_id, isouter=True
            )
            ready = or_(Result.id.is_not(None), Request.status.in_(("failed", "cancelled")))
            unpublished = and_(unpublished, ready)
            # Its waiting is expected, not a sign of a dead worker: every sweep takes it back.
            abandoned = and_(model.status == "running", model.lease_expires_at < now)
        else:
            # A dead worker's job once per republish interval, not every sweep.
            abandoned = and_(
                model.status == "running",
                model.lease_expires_at < now,
                or_(model.published_at.is_(None), model.published_at < resend)
                if resend is not None
                else true(),
            )
        lost = and_(waiting, model.published_at < resend) if resend is not None else false()
        rows = session.execute(query.where(or_(unpublished, abandoned, lost)).order_by(stamp))
        found.extend((job.name, job_id, trace_id) for job_id, trace_id in rows)
    return found


def release_exploration(session: Session, exploration_id: str, owner: str) -> bool:
    """Give back a claimed exploration whose request has no result yet, without using an attempt.

    It returns to 'queued' and unpublished, so the sweeper publishes it once the result exists.
    """
    return bool(
        _update_ours(
            session,
            "exploration",
            exploration_id,
            owner,
            status="queued",
            lease_owner=None,
            lease_expires_at=None,
            published_at=None,
            attempts=Exploration.attempts - 1,
        )
    )


def finish_exploration(session: Session, exploration_id: str, owner: str, result: dict) -> bool:
    """Store our exploration's result and mark it done; False when the lease was lost."""
    now = utcnow()
    done = _update_ours(
        session,
        "exploration",
        exploration_id,
        owner,
        status="done",
        result=result,
        error=None,
        finished_at=now,
        lease_owner=None,
        lease_expires_at=None,
    )
    if done:
        row = session.get(Exploration, exploration_id)
        _event(
            session,
            "exploration",
            exploration_id,
            owner,
            "exploration_done",
            type=row.type,
            result_sha256=content_hash(result),
        )
    return bool(done)


def work_waiting(session: Session) -> bool:
    """True when a published request or rerun waits unclaimed (helpers then make way for it)."""
    for job in JOB_KINDS.values():
        if job.needs_result:
            continue  # explorations are follow-ups: helpers need not make way for them
        model = job.model
        waiting = session.scalar(
            select(model.id)
            .where(model.status.in_(job.queued), model.published_at.is_not(None))
            .limit(1)
        )
        if waiting is not None:
            return True
    return False


def job_status(session: Session, kind: str, job_id: str) -> str | None:
    """Return the job's status (None when there is no such job)."""
    model = job_kind(kind).model
    return session.scalar(select(model.status).where(model.id == job_id))
