"""Job bookkeeping shared by the API, the workers and the sweeper (requests, reruns, analyses).

A job is a row in ``requests`` (kind 'request'), ``reruns`` (kind 'rerun') or ``analyses``
(kind 'analysis'). Workers hold a
lease (lease_owner, lease_expires_at) while they run one; every change here is a conditional
UPDATE so two workers can never both own a job. Functions take a session and never commit.
"""

from __future__ import annotations

import logging
from datetime import datetime, timedelta

from sqlalchemy import and_, false, or_, select, true, update
from sqlalchemy.orm import Session

from service.engine.records import canonical_json, differences, record_hash

from .audit import append_event, content_hash
from .models import Analysis, Request, Rerun, Result
from .types import utcnow

KINDS = ("request", "rerun", "analysis")
log = logging.getLogger(__name__)


def _model(kind: str) -> type[Request] | type[Rerun] | type[Analysis]:
    if kind == "request":
        return Request
    if kind == "rerun":
        return Rerun
    if kind == "analysis":
        return Analysis
    raise ValueError(f"job kind must be one of {KINDS}; got {kind!r}")


def _request_id(session: Session, kind: str, job_id: str) -> str | None:
    if kind == "request":
        return job_id
    model = _model(kind)
    return session.scalar(select(model.request_id).where(model.id == job_id))


def _event(session: Session, kind: str, job_id: str, actor: str, action: str, **detail) -> None:
    """Append a job event; an event that sets a request's status names it (audit verify reads it)."""
    append_event(
        session,
        request_id=_request_id(session, kind, job_id),
        actor=actor,
        action=action,
        detail={"kind": kind, "job_id": job_id, **detail},
    )


def _status(kind: str, status: str) -> dict:
    # Only requests have a status the audit verification follows; reruns and analyses are
    # checked through the hashes of what they stored.
    return {"status": status} if kind == "request" else {}


def _queued_statuses(kind: str) -> tuple[str, ...]:
    return ("received", "queued") if kind == "request" else ("queued",)


def _touch(kind: str, now: datetime) -> dict:
    return {"updated_at": now} if kind == "request" else {}


def _update_ours(session: Session, kind: str, job_id: str, owner: str, **values) -> int:
    # The one guard of every lease-holder's write: still running, still our lease.
    model = _model(kind)
    return session.execute(
        update(model)
        .where(model.id == job_id, model.status == "running", model.lease_owner == owner)
        .values(**values)
    ).rowcount


def mark_published(session: Session, kind: str, job_id: str) -> bool:
    """Record that the job's task reached the broker (the outbox marker); False if no such job.

    Only the first publish writes a 'published' event (and moves a request to 'queued').
    """
    model = _model(kind)
    now = utcnow()
    row = session.execute(select(model.published_at).where(model.id == job_id)).first()
    if row is None:
        return False
    values: dict = {"published_at": now, **_touch(kind, now)}
    session.execute(update(model).where(model.id == job_id).values(**values))
    if row.published_at is not None:
        # A republish (lost message, dead worker) changes nothing a reader of the trail needs:
        # the next claim writes its own event. One 'published' event per job, not per sweep.
        return True
    status = {}
    if kind == "request":
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
    model = _model(kind)
    now = utcnow()
    row = session.get(model, job_id, populate_existing=True)
    if row is None:
        return False
    claimable = or_(
        model.status.in_(_queued_statuses(kind)),
        and_(model.status == "running", model.lease_expires_at < now),
    )
    guard = and_(model.id == job_id, claimable, model.attempts == row.attempts)
    if kind == "request" and row.cancel_requested:
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
                **_touch(kind, now),
            )
        ).rowcount
        if done:
            _event(session, kind, job_id, owner, "failed", error=reason, **_status(kind, "failed"))
        return False
    done = session.execute(
        update(model)
        .where(guard)
        .values(
            status="running",
            lease_owner=owner,
            lease_expires_at=now + timedelta(seconds=lease_seconds),
            attempts=row.attempts + 1,
            **_touch(kind, now),
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
    now = utcnow()
    values: dict = {"lease_expires_at": now + timedelta(seconds=lease_seconds), **_touch(kind, now)}
    if kind == "request" and progress is not None:
        values["progress"] = min(max(float(progress), 0.0), 1.0)
    return bool(_update_ours(session, kind, job_id, owner, **values))


def cancel_requested(session: Session, kind: str, job_id: str) -> bool:
    """True when someone asked the running request to stop (reruns cannot be cancelled)."""
    if kind != "request":
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
    now = utcnow()
    values: dict = {
        "status": "failed",
        "error": error,
        "lease_owner": None,
        "lease_expires_at": None,
        **_touch(kind, now),
    }
    if kind in ("rerun", "analysis"):
        values["finished_at"] = now
    done = _update_ours(session, kind, job_id, owner, **values)
    if done:
        _event(session, kind, job_id, owner, "failed", error=error, **_status(kind, "failed"))
    return bool(done)


def cancel(session: Session, kind: str, job_id: str, owner: str) -> bool:
    """Mark our running request cancelled (the worker saw cancel_requested); False otherwise."""
    if kind != "request":
        raise ValueError("only requests can be cancelled; reruns run to the end")
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
) -> list[tuple[str, str]]:
    """Return (kind, id) of jobs the sweeper must publish (again).

    Those are jobs never published, jobs running on an expired lease and, with
    ``republish_seconds``, jobs published that long ago and still not claimed: a broker that
    restarted without persistence has lost their message. A duplicate message is harmless, since
    only one worker can claim a job. ``grace_seconds`` skips unpublished jobs younger than that
    (the API may be publishing them).
    """
    cutoff = now - timedelta(seconds=grace_seconds)
    resend = None if republish_seconds is None else now - timedelta(seconds=republish_seconds)
    jobs: list[tuple[str, str]] = []
    for kind, model, stamp in (
        ("request", Request, Request.submitted_at),
        ("rerun", Rerun, Rerun.requested_at),
    ):
        lost = (
            and_(model.status.in_(_queued_statuses(kind)), model.published_at < resend)
            if resend is not None
            else false()
        )
        rows = session.scalars(
            select(model.id)
            .where(
                or_(
                    and_(
                        model.published_at.is_(None),
                        model.status.in_(_queued_statuses(kind)),
                        stamp <= cutoff,
                    ),
                    # A dead worker's job once per republish interval, not every sweep.
                    and_(
                        model.status == "running",
                        model.lease_expires_at < now,
                        or_(model.published_at.is_(None), model.published_at < resend)
                        if resend is not None
                        else true(),
                    ),
                    lost,
                )
            )
            .order_by(stamp)
        )
        jobs.extend((kind, job_id) for job_id in rows)
    # An analysis waits, unpublished, until its request has a result to analyse (or has ended
    # without one, so the worker can fail it with the reason).
    rows = session.scalars(
        select(Analysis.id)
        .join(Request, Request.id == Analysis.request_id)
        .join(Result, Result.request_id == Analysis.request_id, isouter=True)
        .where(
            or_(
                and_(
                    Analysis.published_at.is_(None),
                    Analysis.status == "queued",
                    or_(Result.id.is_not(None), Request.status.in_(("failed", "cancelled"))),
                    Analysis.created_at <= cutoff,
                ),
                and_(Analysis.status == "running", Analysis.lease_expires_at < now),
                and_(Analysis.status == "queued", Analysis.published_at < resend)
                if resend is not None
                else false(),
            )
        )
        .order_by(Analysis.created_at)
    )
    jobs.extend(("analysis", job_id) for job_id in rows)
    return jobs


def release_analysis(session: Session, analysis_id: str, owner: str) -> bool:
    """Give back a claimed analysis whose request has no result yet, without using an attempt.

    It returns to 'queued' and unpublished, so the sweeper publishes it once the result exists.
    """
    return bool(
        _update_ours(
            session,
            "analysis",
            analysis_id,
            owner,
            status="queued",
            lease_owner=None,
            lease_expires_at=None,
            published_at=None,
            attempts=Analysis.attempts - 1,
        )
    )


def finish_analysis(session: Session, analysis_id: str, owner: str, result: dict) -> bool:
    """Store our analysis's result and mark it done; False when the lease was lost."""
    now = utcnow()
    done = _update_ours(
        session,
        "analysis",
        analysis_id,
        owner,
        status="done",
        result=result,
        error=None,
        finished_at=now,
        lease_owner=None,
        lease_expires_at=None,
    )
    if done:
        kind = session.scalar(select(Analysis.kind).where(Analysis.id == analysis_id))
        _event(
            session,
            "analysis",
            analysis_id,
            owner,
            "analysis_done",
            analysis=kind,
            result_sha256=content_hash(result),
        )
    return bool(done)


def work_waiting(session: Session) -> bool:
    """True when a published request or rerun waits unclaimed (helpers then make way for it)."""
    for model in (Request, Rerun):
        waiting = session.scalar(
            select(model.id)
            .where(model.status.in_(_queued_statuses("request" if model is Request else "rerun")))
            .where(model.published_at.is_not(None))
            .limit(1)
        )
        if waiting is not None:
            return True
    return False


def job_status(session: Session, kind: str, job_id: str) -> str | None:
    """Return the job's status (None when there is no such job)."""
    model = _model(kind)
    return session.scalar(select(model.status).where(model.id == job_id))
