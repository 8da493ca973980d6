"""The desk's pages: sign in and out, the queue, a request, and the admins' token page."""

from __future__ import annotations

from flask import flash, redirect, request, url_for
from sqlalchemy import select

from service.api import render
from service.api.context import sessions
from service.api.identity import current_caller, visible_submitter
from service.api.tokens import all_tokens
from service.api.views import load_request
from service.reports.render import STATUS_LABELS, question_rows
from service.store import requests as store
from service.store.db import session_scope
from service.store.models import REQUEST_STATUSES, TOKEN_ROLES, ApiToken
from service.store.types import utcnow

from . import explorations, labels, queue
from . import session as desk_session
from .blueprint import bp, page, safe_next
from .report import report_parts
from .timeline import timeline


@bp.get("/")
def home():
    """Send each role to its first page: admins to the tokens, everyone else to the queue."""
    if current_caller().role == "admin":
        return redirect(url_for("desk.tokens"))
    return redirect(url_for("desk.queue"))


@bp.get("/sign-in")
def sign_in_form():
    """The sign-in form: one field, the token."""
    return page("desk/sign_in.html", next=safe_next(request.args.get("next")))


@bp.post("/sign-in")
def sign_in():
    """Check the token with the API's lookup, open a session, go where the browser was going."""
    caller = desk_session.sign_in(request.form.get("token", ""))
    target = safe_next(request.form.get("next"))
    if caller is None:
        flash("That token is unknown or revoked. Check it and try again.", "error")
        return page("desk/sign_in.html", 401, next=target)
    return redirect(target)


@bp.post("/sign-out")
def sign_out():
    """End the session on the server and drop the cookie."""
    desk_session.sign_out()
    flash("You are signed out.", "info")
    return redirect(url_for("desk.sign_in_form"))


def _row_view(row, today) -> dict:
    protocol, requester = row.protocol or {}, row.requester or {}
    return {
        "id": row.id,
        "protocol_title": protocol.get("title") or "Untitled protocol",
        "protocol_id": protocol.get("id") or row.protocol_id,
        "requester": requester.get("name") or "—",
        "department": requester.get("department"),
        "cell": labels.question_label(row.question),
        "status": row.status,
        "status_label": STATUS_LABELS.get(row.status, row.status),
        "assigned_to": row.assigned_to,
        "deadline": row.deadline,
        "overdue": queue.is_overdue(row.deadline, row.status, today),
    }


@bp.get("/requests", endpoint="queue")
def queue_page():
    """The queue: filters, counts per status, overdue marks, sorted by needed-by date, paged."""
    filters = queue.parse(request.args)
    caller = current_caller()
    today = utcnow().date()
    with session_scope(sessions()) as db:
        found = queue.load(
            db, filters, me=caller.name, submitted_by=visible_submitter(), today=today
        )
        rows = [_row_view(r, today) for r in found.rows]
    return page(
        "desk/queue.html",
        filters=filters,
        found=found,
        rows=rows,
        statuses=[(s, STATUS_LABELS.get(s, s)) for s in REQUEST_STATUSES],
        cells=[(c, labels.cell_label(c)) for c in labels.cells()],
        sorts=queue.SORTS,
        unassigned=queue.UNASSIGNED,
    )


def _colleagues(db) -> list[str]:
    """Names of active statistician tokens: the people a request can be assigned to."""
    return list(
        db.scalars(
            select(ApiToken.name)
            .where(ApiToken.role == "statistician", ApiToken.revoked_at.is_(None))
            .distinct()
            .order_by(ApiToken.name)
        )
    )


@bp.get("/requests/<request_id>")
def request_page(request_id: str):
    """One request: its report (when computed), the review forms its status allows, its history."""
    with session_scope(sessions()) as db:
        row = load_request(db, request_id)
        detail = render.request_detail(db, row)
        overdue = queue.is_overdue(row.deadline, row.status, utcnow().date())
        done = explorations.finished(db, request_id)
        reruns = [render.rerun(r) for r in store.reruns_for(db, request_id)]
        colleagues = _colleagues(db)
    report = report_parts(detail, done) if detail["result"] is not None else None
    status = detail["status"]
    return page(
        "desk/request.html",
        req=detail,
        status_label=STATUS_LABELS.get(status, status),
        cell=labels.question_label(detail["question"]),
        question_rows=_question_rows(detail["question"]) if report is None else [],
        report=report,
        events=timeline(detail["history"]),
        reruns=reruns,
        colleagues=colleagues,
        grid_paths=labels.grid_paths(detail["question"]),
        kinds={"grid": explorations.GRID, "panel": explorations.PANEL},
        may={
            "assign": status != "cancelled",
            "review": status in store.REVIEWABLE,
            "cancel": status in store.CANCELLABLE and not detail["cancel_requested"],
            "explore": status not in ("failed", "cancelled"),
            "rerun": detail["result"] is not None,
        },
        overdue=overdue,
    )


def _question_rows(question: dict) -> list[tuple[str, str]]:
    # The report's own plain-English rows; a question it cannot read is shown as its cell only.
    try:
        return question_rows(question)
    except (KeyError, TypeError, ValueError):
        return [("Design", labels.question_label(question))]


@bp.get("/tokens")
def tokens():
    """Admins: every token (never a secret), the form to issue one, a revoke button each."""
    return page("desk/tokens.html", tokens=all_tokens(), roles=TOKEN_ROLES, issued=None)
