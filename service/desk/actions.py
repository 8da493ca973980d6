"""The review forms of a request page: each does what its API endpoint does, through the same
schemas, store functions and checks (legal transitions only, four eyes, budgets)."""

from __future__ import annotations

from flask import flash, redirect, request, url_for

from service.api.context import sessions
from service.api.errors import ValidationFailed
from service.api.identity import current_actor, current_caller
from service.api.requests import review_decision, start_rerun, transition_refused
from service.api.tokens import all_tokens, issue_token, revoke
from service.api.views import load_request
from service.schemas.api import AssignSchema, CancelSchema, CommentSchema, ReviewNoteSchema
from service.store import requests as store
from service.store.db import session_scope
from service.store.models import TOKEN_ROLES

from . import explorations
from .blueprint import bp, page


def _form(schema, *names: str) -> dict:
    """The posted fields ``names`` (blank ones left out) loaded by the API's body schema."""
    data = {n: request.form[n].strip() for n in names if request.form.get(n, "").strip()}
    return schema.load(data)


def _change(request_id: str, change, done: str):
    """Run one guarded change of the request; a refused transition is a readable 409 page."""
    actor = current_actor()
    with session_scope(sessions()) as db:
        row = load_request(db, request_id)
        try:
            change(db, row, actor)
        except store.TransitionRefused as exc:
            raise transition_refused(exc) from None
    flash(done, "ok")
    return redirect(url_for("desk.request_page", request_id=request_id))


@bp.post("/requests/<request_id>/assign")
def assign(request_id: str):
    """Assign to me (``me``) or to the colleague named in ``to``."""
    to = current_caller().name if request.form.get("me") else request.form.get("to", "")
    data = AssignSchema().load({"to": to.strip()})
    return _change(
        request_id,
        lambda db, row, actor: store.assign(db, row, actor, data["to"]),
        f"Assigned to {data['to']}.",
    )


@bp.post("/requests/<request_id>/comment")
def comment(request_id: str):
    """Add a comment to the request's history."""
    data = _form(CommentSchema(), "text")
    return _change(
        request_id,
        lambda db, row, actor: store.comment(db, row, actor, data["text"]),
        "Comment added.",
    )


def _review(request_id: str, decision: str, done: str):
    data = _form(ReviewNoteSchema(), "note")
    return _change(
        request_id,
        lambda db, row, actor: review_decision(db, row, actor, decision, data["note"]),
        done,
    )


@bp.post("/requests/<request_id>/approve")
def approve(request_id: str):
    """Approve the computed answer (a note is required; four-eyes review applies)."""
    return _review(request_id, "approve", "Approved.")


@bp.post("/requests/<request_id>/return")
def return_request(request_id: str):
    """Return the computed answer to the requester with a note."""
    return _review(request_id, "return", "Returned to the requester.")


@bp.post("/requests/<request_id>/cancel")
def cancel(request_id: str):
    """Cancel a waiting request, or ask a running one to stop."""
    data = _form(CancelSchema(), "reason")
    return _change(
        request_id,
        lambda db, row, actor: store.cancel_request(db, row, actor, data.get("reason")),
        "Cancelled (a running computation stops between chunks).",
    )


def _grid_values(text: str) -> list[float]:
    try:
        return [float(v) for v in text.replace(";", ",").split(",") if v.strip()]
    except ValueError:
        raise ValidationFailed(
            "grid values must be numbers separated by commas, e.g. 0.4, 0.5, 0.6",
            errors={"grid.values": ["numbers separated by commas"]},
        ) from None


@bp.post("/requests/<request_id>/explore")
def explore(request_id: str):
    """Ask for a sensitivity grid (one path, its values) or a robustness panel."""
    kind = request.form.get("type", "")
    grid = None
    if kind == explorations.GRID:
        path = request.form.get("path", "").strip()
        grid = {path: _grid_values(request.form.get("values", ""))}
    explorations.ask(request_id, kind, grid)
    asked = "Sensitivity grid" if kind == explorations.GRID else "Robustness panel"
    flash(f"{asked} asked for; it appears in the report when a worker has computed it.", "ok")
    return redirect(url_for("desk.request_page", request_id=request_id))


@bp.post("/requests/<request_id>/rerun")
def rerun(request_id: str):
    """Auditors: recompute the stored question; the verdict appears once the worker is done."""
    note = request.form.get("note", "").strip() or None
    start_rerun(request_id, note)
    flash("Rerun queued; its verdict appears below when it is done.", "ok")
    return redirect(url_for("desk.request_page", request_id=request_id))


@bp.post("/tokens")
def issue():
    """Admins: issue a token and show its secret on this page, once."""
    created = issue_token(request.form.get("role", ""), request.form.get("name", ""))
    return page("desk/tokens.html", tokens=all_tokens(), roles=TOKEN_ROLES, issued=created)


@bp.post("/tokens/<token_id>/revoke")
def revoke_token(token_id: str):
    """Admins: revoke a token (its API calls and desk sessions stop)."""
    revoked = revoke(token_id)
    flash(f"Revoked the token of {revoked['name']} ({revoked['role']}).", "ok")
    return redirect(url_for("desk.tokens"))
