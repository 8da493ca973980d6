"""Data functions for requests, their review and their reruns (take a session, never commit)."""

from __future__ import annotations

import hashlib
import json
import uuid
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from typing import Any

from sqlalchemy import bindparam, exists, func, select
from sqlalchemy.orm import Session

from service import jsonlog

from .audit import add_with_event, append_event, content_hash, events_for
from .models import ENDED_STATUSES, AuditEvent, Exploration, Request, Rerun, Result
from .paging import Key, keyset_page, of_request, page_of_request
from .types import utcnow


class TransitionRefused(Exception):
    """The action is not allowed from the request's current status."""

    def __init__(self, action: str, status: str, allowed_from: tuple[str, ...]):
        self.action = action
        self.status = status
        self.allowed_from = allowed_from
        allowed = ", ".join(allowed_from) if allowed_from else "no status"
        super().__init__(
            f"cannot {action} a request whose status is '{status}'; allowed from: {allowed}"
        )


class ResultMissing(Exception):
    """The request has no stored result (needed for a rerun)."""

    def __init__(self, request_id: str, status: str):
        self.request_id = request_id
        self.status = status
        super().__init__(
            f"request {request_id} has no stored result yet (status '{status}'); "
            "a rerun needs the original record"
        )


@dataclass(frozen=True)
class Page:
    """One page of a listing."""

    items: list[Request]
    total: int
    # Where the next page starts (None after the last page).
    next_key: Key | None = None


def body_digest(body: Any) -> str:
    """SHA-256 of the canonical JSON of a posted body (the idempotency fingerprint)."""
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def new_id() -> str:
    """Return a fresh identifier (uuid4 as 32 hex digits)."""
    return uuid.uuid4().hex


def by_idempotency_key(session: Session, key: str) -> Request | None:
    """Return the request created with ``key``, if any."""
    return session.scalar(select(Request).where(Request.idempotency_key == key))


def create_request(
    session: Session,
    *,
    protocol: dict,
    requester: dict,
    deadline: date | None,
    notes: str | None,
    question_raw: dict,
    question: dict,
    actor: str,
    idempotency_key: str | None,
    body_sha256: str,
    submitted_by: str | None = None,
) -> Request:
    """Insert a received request and its 'submitted' audit event (submitted_by defaults to actor)."""
    simulation = question.get("simulation") or {}
    row = Request(
        id=new_id(),
        status="received",
        trace_id=jsonlog.current().get("request_id"),
        protocol=protocol,
        protocol_id=protocol["id"],
        requester=requester,
        requester_name=requester["name"],
        requester_email=requester["email"],
        department=requester.get("department"),
        deadline=deadline,
        notes=notes,
        question_raw=question_raw,
        question=question,
        design=design_key(question),
        method=question["method"],
        seed=simulation.get("seed"),
        progress=0.0,
        cancel_requested=False,
        idempotency_key=idempotency_key,
        body_sha256=body_sha256,
        submitted_by=submitted_by if submitted_by is not None else actor,
        attempts=0,
    )
    return add_with_event(
        session,
        row,
        request_id=row.id,
        actor=actor,
        action="submitted",
        detail={
            "outcome": question["outcome"],
            "layout": question["layout"],
            "method": row.method,
            "seed": row.seed,
            "status": row.status,
            # What the audit verification compares the stored rows with, later.
            "question_sha256": question_hash(row),
            "submission_sha256": submission_hash(row),
        },
    )


def design_key(question: dict) -> str:
    """The value of the ``requests.design`` column: ``<outcome>/<layout>`` (filters and lists)."""
    return f"{question['outcome']}/{question['layout']}"


def question_hash(row: Request) -> str:
    """Hash of the stored normalized question (what the engine and every rerun compute)."""
    return content_hash(row.question)


def submission_fields(row: Request) -> dict:
    """The rest of the submission as stored: protocol, requester, deadline, notes, raw question."""
    return {
        "protocol": row.protocol,
        "requester": row.requester,
        "deadline": row.deadline,
        "notes": row.notes,
        "question_raw": row.question_raw,
        "submitted_by": row.submitted_by,
    }


def submission_hash(row: Request) -> str:
    """Hash of the submission's fields (what the 'submitted' event holds)."""
    return content_hash(submission_fields(row))


def get_request(session: Session, request_id: str) -> Request | None:
    """Return the request with ``request_id`` or None."""
    return session.get(Request, request_id)


def result_for(session: Session, request_id: str) -> Result | None:
    """Return the stored original result of a request, if any."""
    return session.scalar(_RESULT_OF_REQUEST, {"request_id": request_id})


_RESULT_OF_REQUEST = select(Result).where(Result.request_id == bindparam("request_id"))


@dataclass(frozen=True)
class Present:
    """Which of a request's result, reruns and explorations exist."""

    result: bool
    reruns: bool
    explorations: bool


def present(session: Session, request_id: str) -> Present:
    """Which of the request's result, reruns and explorations exist, in one query.

    A request being polled while it runs has none of them: its full view then reads the
    request and its history only, not three more empty lists.
    """
    return Present(*(bool(flag) for flag in session.execute(_PRESENT, {"id": request_id}).one()))


def request_and_present(session: Session, request_id: str) -> tuple[Request, Present] | None:
    """The request ``request_id`` and which of its children exist (one query), or None."""
    row = session.execute(_REQUEST_AND_PRESENT, {"id": request_id}).one_or_none()
    if row is None:
        return None
    return row[0], Present(*(bool(flag) for flag in row[1:]))


# Built once (as the other statements of a request's view): constructing the subqueries cost
# more than running them. Each is correlated with the request row the statement reads.
_CHILDREN = (
    exists().where(Result.request_id == Request.id),
    exists().where(Rerun.request_id == Request.id),
    exists().where(Exploration.request_id == Request.id),
)
_PRESENT = select(*_CHILDREN).where(Request.id == bindparam("id"))
_REQUEST_AND_PRESENT = select(Request, *_CHILDREN).where(Request.id == bindparam("id"))


def history(session: Session, request_id: str) -> list[AuditEvent]:
    """Return the request's audit events, oldest first."""
    return events_for(session, request_id)


def list_requests(
    session: Session,
    *,
    status: str | None = None,
    protocol_id: str | None = None,
    requester: str | None = None,
    outcome: str | None = None,
    layout: str | None = None,
    submitted_from: date | None = None,
    submitted_to: date | None = None,
    submitted_by: str | None = None,
    after: Key | None = None,
    limit: int = 20,
) -> Page:
    """Return one page of requests, newest first, filtered; dates are whole UTC days, inclusive.

    Pages are keyset pages on (submitted_at, id) descending: ``after`` is the previous page's
    ``next_key``.
    """
    conditions = []
    if status is not None:
        conditions.append(Request.status == status)
    if protocol_id is not None:
        conditions.append(Request.protocol_id == protocol_id)
    if requester is not None:
        conditions.append(func.lower(Request.requester_email) == requester.lower())
    if outcome is not None and layout is not None:
        conditions.append(Request.design == design_key({"outcome": outcome, "layout": layout}))
    elif outcome is not None:
        conditions.append(Request.design.startswith(f"{outcome}/", autoescape=True))
    elif layout is not None:
        conditions.append(Request.design.endswith(f"/{layout}", autoescape=True))
    if submitted_by is not None:
        conditions.append(Request.submitted_by == submitted_by)
    if submitted_from is not None:
        conditions.append(Request.submitted_at >= datetime.combine(submitted_from, time(), UTC))
    if submitted_to is not None:
        end = datetime.combine(submitted_to + timedelta(days=1), time(), UTC)
        conditions.append(Request.submitted_at < end)
    total = session.scalar(select(func.count()).select_from(Request).where(*conditions)) or 0
    items, next_key = keyset_page(
        session,
        select(Request).where(*conditions),
        Request.submitted_at,
        Request.id,
        after=after,
        limit=limit,
        newest_first=True,
    )
    return Page(items=items, total=total, next_key=next_key)


def _touch(row: Request) -> None:
    row.updated_at = utcnow()


CANCELLABLE = ("received", "queued", "running")
REVIEWABLE = ("computed",)


def cancel_request(session: Session, row: Request, actor: str, reason: str | None) -> Request:
    """Cancel a waiting request now, or ask a running one to stop between chunks."""
    if row.status not in CANCELLABLE:
        raise TransitionRefused("cancel", row.status, CANCELLABLE)
    if row.status == "running":
        if not row.cancel_requested:
            row.cancel_requested = True
            _touch(row)
            append_event(
                session,
                request_id=row.id,
                actor=actor,
                action="cancel_requested",
                detail={"reason": reason},
            )
    else:
        row.status = "cancelled"
        row.cancel_requested = True
        _touch(row)
        append_event(
            session,
            request_id=row.id,
            actor=actor,
            action="cancelled",
            detail={"reason": reason, "status": row.status},
        )
    session.flush()
    return row


def assign(session: Session, row: Request, actor: str, to: str) -> Request:
    """Assign the request to a reviewer (any status but cancelled)."""
    if row.status == "cancelled":
        allowed = tuple(s for s in (*CANCELLABLE, *ENDED_STATUSES) if s != "cancelled")
        raise TransitionRefused("assign", row.status, allowed)
    previous = row.assigned_to
    row.assigned_to = to
    _touch(row)
    append_event(
        session,
        request_id=row.id,
        actor=actor,
        action="assigned",
        detail={"to": to, "previous": previous},
    )
    session.flush()
    return row


def comment(session: Session, row: Request, actor: str, text: str) -> AuditEvent:
    """Add a reviewer's comment (kept in the audit trail) and return its event."""
    return append_event(
        session, request_id=row.id, actor=actor, action="comment", detail={"text": text}
    )


def review(session: Session, row: Request, actor: str, decision: str, note: str) -> Request:
    """Approve or return a computed request with the reviewer's note."""
    if decision not in ("approve", "return"):
        raise ValueError(f"decision must be 'approve' or 'return'; got {decision!r}")
    if row.status not in REVIEWABLE:
        raise TransitionRefused(decision, row.status, REVIEWABLE)
    row.status = "approved" if decision == "approve" else "returned"
    _touch(row)
    append_event(
        session,
        request_id=row.id,
        actor=actor,
        action=row.status,
        detail={"note": note, "status": row.status},
    )
    session.flush()
    return row


def create_rerun(session: Session, row: Request, actor: str, note: str | None) -> Rerun:
    """Queue a recomputation of the request's stored question (needs a stored result)."""
    result = result_for(session, row.id)
    if result is None:
        raise ResultMissing(row.id, row.status)
    rerun = Rerun(
        id=new_id(),
        request_id=row.id,
        status="queued",
        requested_by=actor,
        attempts=0,
        env_original=dict(result.versions or {}),
        trace_id=jsonlog.current().get("request_id"),
    )
    return add_with_event(
        session,
        rerun,
        request_id=row.id,
        actor=actor,
        action="rerun_requested",
        detail={"rerun_id": rerun.id, "note": note},
    )


def reruns_for(session: Session, request_id: str) -> list[Rerun]:
    """Return the request's reruns, oldest first."""
    return of_request(session, Rerun, Rerun.requested_at, request_id)


def reruns_page(
    session: Session, request_id: str, *, after: Key | None, limit: int
) -> tuple[list[Rerun], Key | None]:
    """One page of the request's reruns, oldest first, and the key of the next page."""
    return page_of_request(session, Rerun, Rerun.requested_at, request_id, after=after, limit=limit)


def get_rerun(session: Session, request_id: str, rerun_id: str) -> Rerun | None:
    """Return the rerun ``rerun_id`` of request ``request_id`` or None."""
    rerun = session.get(Rerun, rerun_id)
    return rerun if rerun is not None and rerun.request_id == request_id else None
