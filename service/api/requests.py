"""Study requests: submit, list, read, cancel, review and rerun."""

from __future__ import annotations

import copy
import re

from flask import Blueprint, jsonify, request, url_for
from sqlalchemy.exc import IntegrityError

from service.engine import draw_seed, estimate_cost
from service.schemas.api import (
    AssignSchema,
    CancelSchema,
    CommentSchema,
    RerunCreateSchema,
    ReviewNoteSchema,
)
from service.schemas.requests import (
    AuditEventSchema,
    RequestCreateSchema,
    RequestPageSchema,
    RequestQueryArgsSchema,
    RequestSchema,
    RerunListSchema,
    RerunSchema,
)
from service.schemas.shared import shared
from service.store import requests as store
from service.store.db import session_scope
from service.store.models import ApiToken

from . import render
from .auth import charge, check_submission_cost
from .caching import conditional
from .context import sessions, settings
from .docs import operation
from .errors import ApiError, Conflict, NotFound, ValidationFailed
from .explorations import store_submission
from .feasibility import check_computable
from .identity import current_actor, current_caller, submitter
from .io import load_body, raw_json_body, reject_query
from .pagination import PageArgsSchema, page_args, page_body
from .publishing import answer_in, publish_explorations, publish_job
from .views import load_request, load_request_and_present, located, visible_request_page

bp = Blueprint("requests", __name__, url_prefix="/v1")

IDEMPOTENCY_HEADER = "Idempotency-Key"
_KEY_PATTERN = re.compile(r"^[\x21-\x7e]{1,200}$")
BODY_ERRORS = (400, 404, 409, 413, 415, 422, 500, 503)


def transition_refused(exc: store.TransitionRefused) -> Conflict:
    return Conflict(str(exc), current_status=exc.status, allowed_from=list(exc.allowed_from))


def _transition(request_id: str, schema, change, *, optional: bool = False):
    # One shape for every guarded change of a request: body, lookup, store call, 409 if refused.
    reject_query()
    actor = current_actor()
    _raw, data = load_body(schema, optional=optional)
    with session_scope(sessions()) as session:
        row = load_request(session, request_id)
        try:
            change(session, row, actor, data)
        except store.TransitionRefused as exc:
            raise transition_refused(exc) from None
        return jsonify(render.request_detail(session, row))


def _idempotency_key() -> str | None:
    key = request.headers.get(IDEMPOTENCY_HEADER)
    if key is None:
        return None
    if not _KEY_PATTERN.match(key):
        raise ValidationFailed(
            f"header {IDEMPOTENCY_HEADER} must be 1-200 visible ASCII characters",
            errors={f"headers.{IDEMPOTENCY_HEADER}": ["must be 1-200 visible ASCII characters"]},
        )
    return key


def _replay(session, key: str, digest: str):
    """Return the earlier request made with ``key`` (None if none); 422 when the body differs."""
    existing = store.by_idempotency_key(session, key)
    if existing is None:
        return None
    if existing.submitted_by != submitter():
        # Keys are global; another caller's key must neither replay nor reveal its request.
        raise ValidationFailed(
            f"{IDEMPOTENCY_HEADER} '{key}' was already used by another client; use a new key",
            errors={f"headers.{IDEMPOTENCY_HEADER}": ["already used by another client"]},
        )
    if existing.body_sha256 != digest:
        raise ValidationFailed(
            f"{IDEMPOTENCY_HEADER} '{key}' was already used with a different body "
            f"(request {existing.id}); use a new key for a new request",
            errors={f"headers.{IDEMPOTENCY_HEADER}": ["already used with a different body"]},
        )
    return render.request_detail(session, existing)


def _with_seed(question: dict) -> dict:
    simulation = question.get("simulation")
    if (
        question.get("method") != "simulation"
        or not simulation
        or simulation.get("seed") is not None
    ):
        return question
    # The seed is drawn once, here, and stored: the same request always gives the same digits.
    question = copy.deepcopy(question)
    question["simulation"]["seed"] = draw_seed()
    return question


def _created(body: dict, status: int):
    return located(body, status, url_for("requests.get_request", request_id=body["id"]))


@bp.post("/requests")
@operation(
    "Submit a question for a study protocol",
    tag="requests",
    status=202,
    response=RequestSchema,
    body=RequestCreateSchema,
    description=(
        "Stores the request. A closed-form (analytic) question is answered at once and comes "
        "back with status computed and its record; a simulation is handed to the queue. "
        "With an Idempotency-Key header the "
        "same key and body return the first request (200); the same key with another body is 422."
    ),
    errors=(400, 413, 415, 422, 429, 500, 503),
    headers={"Location": "URL of the request"},
    request_headers={IDEMPOTENCY_HEADER: "Makes a retried submission safe"},
)
def submit_request():
    """Store a new request and publish it to the workers."""
    reject_query()
    key = _idempotency_key()
    body, status = submit(raw_json_body(), key)
    return _created(body, status)


def submit(raw: object, key: str | None = None) -> tuple[dict, int]:
    """Validate, store and answer (or queue) one submission; return (request detail, status).

    The one way in for POST /v1/requests and the intake page: the same schema (marshmallow's
    ValidationError, or ValidationFailed naming the field), the same budget and the same store.
    Status 200 is an idempotent replay of ``key``'s earlier request, 202 a new one.
    """
    actor = current_actor()
    digest = store.body_digest(raw)
    if key is not None:
        with session_scope(sessions()) as session:
            earlier = _replay(session, key, digest)
        if earlier is not None:
            return earlier, 200
    data = shared(RequestCreateSchema).load(raw)
    answer = check_computable(data["question"], data["question_raw"])
    estimate = check_submission_cost(data["question"])
    question = _with_seed(data["question"])
    # A closed-form answer costs milliseconds: it is stored with the request, in its transaction.
    here = (
        answer is not None
        and question.get("method") != "simulation"
        and settings().get("ANSWER_AT_SUBMISSION", True)
    )
    answered: list[str] | None = None
    try:
        with session_scope(sessions()) as session:
            row = store.create_request(
                session,
                protocol=data["protocol"],
                requester=data["requester"],
                deadline=data.get("deadline"),
                notes=data.get("notes"),
                question_raw=data["question_raw"],
                question=question,
                actor=actor,
                submitted_by=submitter(),
                idempotency_key=key,
                body_sha256=digest,
            )
            # The effect source and explorations asked for with the request are one row set.
            explorations = store_submission(session, row, data, actor)
            # Budget check and reservation in the transaction that stores the work: all or nothing.
            charge(session, [("request", row.id, estimate), *explorations])
            request_id = row.id
            if here:
                answered = answer_in(session, request_id, answer)
    except IntegrityError:
        if key is None:
            raise
        # A concurrent submission with the same key won the insert: answer with its request.
        with session_scope(sessions()) as session:
            earlier = _replay(session, key, digest)
        if earlier is None:
            raise
        return earlier, 200
    if answered is not None:
        publish_explorations(answered)
    else:
        publish_job("request", request_id)
    with session_scope(sessions()) as session:
        return render.request_detail(session, store.get_request(session, request_id)), 202


@bp.get("/requests")
@operation(
    "List requests (filtered, newest first)",
    tag="requests",
    response=RequestPageSchema,
    query=RequestQueryArgsSchema,
    errors=(422, 500, 503),
)
def list_requests():
    """Return one page of requests matching the filters."""
    return jsonify(visible_request_page())


@bp.get("/requests/<request_id>")
@operation(
    "Read one request: status, progress, result, history and reruns",
    tag="requests",
    response=RequestSchema,
    description=(
        "Sends a strong ETag (SHA-256 of the body); a GET with If-None-Match naming it gets "
        "304 and no body while the request is unchanged."
    ),
    errors=(404, 422, 500, 503),
    headers={"ETag": "SHA-256 of the body"},
    also={304: "Not modified: the ETag in If-None-Match is current (no body)"},
    request_headers={"If-None-Match": "An ETag from an earlier answer"},
)
def get_request(request_id: str):
    """Return the request with its result record (or null) and its audit history."""
    reject_query()
    with session_scope(sessions()) as session:
        body = render.request_detail(session, *load_request_and_present(session, request_id))
    return conditional(jsonify(body))


@bp.post("/requests/<request_id>/cancel")
@operation(
    "Cancel a request",
    tag="requests",
    response=RequestSchema,
    body=CancelSchema,
    body_required=False,
    description=(
        "A received or queued request is cancelled at once; a running one is asked to stop "
        "between chunks (cancel_requested). A finished request cannot be cancelled (409)."
    ),
    errors=BODY_ERRORS,
)
def cancel_request(request_id: str):
    """Cancel the request or ask its worker to stop."""
    return _transition(
        request_id,
        CancelSchema(),
        lambda session, row, actor, data: store.cancel_request(
            session, row, actor, data.get("reason")
        ),
        optional=True,
    )


@bp.post("/requests/<request_id>/assign")
@operation(
    "Assign the request to a reviewer",
    tag="review",
    response=RequestSchema,
    body=AssignSchema,
    errors=BODY_ERRORS,
)
def assign_request(request_id: str):
    """Record who reviews the request."""
    return _transition(
        request_id,
        AssignSchema(),
        lambda session, row, actor, data: store.assign(session, row, actor, data["to"]),
    )


@bp.post("/requests/<request_id>/comments")
@operation(
    "Comment on a request",
    tag="review",
    status=201,
    response=AuditEventSchema,
    body=CommentSchema,
    errors=BODY_ERRORS,
)
def comment_request(request_id: str):
    """Add a comment to the request's history and return it."""
    reject_query()
    actor = current_actor()
    _raw, data = load_body(CommentSchema())
    with session_scope(sessions()) as session:
        row = load_request(session, request_id)
        event = render.event(store.comment(session, row, actor, data["text"]))
    return jsonify(event), 201


def _four_eyes(session, row) -> None:
    """Refuse (403) an approval by the token that submitted the request or by its holder."""
    if not settings()["FOUR_EYES"] or row.status not in store.REVIEWABLE:
        return
    caller = current_caller()
    submitted_with = session.get(ApiToken, row.submitted_by)
    # Token names identify people (one person may hold an intake and a statistician token).
    same_person = submitted_with is not None and (
        submitted_with.name.casefold() == caller.name.casefold()
    )
    if row.submitted_by == caller.token_id or same_person:
        raise ApiError(
            f"request '{row.id}' was submitted by '{caller.name}'; four-eyes review needs "
            "another statistician to approve it",
            status=403,
            title="Approval needs a second person",
            slug="four-eyes",
            errors={"token": ["the approver must not be the submitter"]},
        )


def review_decision(session, row, actor: str, decision: str, note: str):
    """Approve (four-eyes checked) or return a computed request: the API's and the desk's way."""
    if decision == "approve":
        _four_eyes(session, row)
    return store.review(session, row, actor, decision, note)


def _review(request_id: str, decision: str):
    def change(session, row, actor, data):
        return review_decision(session, row, actor, decision, data["note"])

    return _transition(request_id, ReviewNoteSchema(), change)


@bp.post("/requests/<request_id>/approve")
@operation(
    "Approve a computed request (a note is required)",
    tag="review",
    response=RequestSchema,
    body=ReviewNoteSchema,
    errors=BODY_ERRORS,
)
def approve_request(request_id: str):
    """Approve the computed answer."""
    return _review(request_id, "approve")


@bp.post("/requests/<request_id>/return")
@operation(
    "Return a computed request to the requester (a note is required)",
    tag="review",
    response=RequestSchema,
    body=ReviewNoteSchema,
    errors=BODY_ERRORS,
)
def return_request(request_id: str):
    """Send the computed answer back with the reviewer's note."""
    return _review(request_id, "return")


@bp.post("/requests/<request_id>/reruns")
@operation(
    "Recompute the stored question and compare with the stored result",
    tag="reruns",
    status=202,
    response=RerunSchema,
    body=RerunCreateSchema,
    body_required=False,
    errors=BODY_ERRORS,
    headers={"Location": "URL of the rerun"},
)
def create_rerun(request_id: str):
    """Queue a rerun of a request that has a result."""
    reject_query()
    _raw, data = load_body(RerunCreateSchema(), optional=True)
    rerun_id = start_rerun(request_id, data.get("note"))
    with session_scope(sessions()) as session:
        body = render.rerun(store.get_rerun(session, request_id, rerun_id))
    return located(
        body, 202, url_for("requests.get_rerun", request_id=request_id, rerun_id=rerun_id)
    )


def start_rerun(request_id: str, note: str | None) -> str:
    """Store a rerun of a request with a result, charge it, publish it; return its id (or 409)."""
    actor = current_actor()
    with session_scope(sessions()) as session:
        row = load_request(session, request_id)
        try:
            rerun_id = store.create_rerun(session, row, actor, note).id
        except store.ResultMissing as exc:
            raise Conflict(str(exc), current_status=exc.status) from None
        # A rerun simulates again: the auditor's token pays like any other.
        charge(session, [("rerun", rerun_id, estimate_cost(row.question))])
    publish_job("rerun", rerun_id)
    return rerun_id


@bp.get("/requests/<request_id>/reruns")
@operation(
    "List a request's reruns (oldest first, paginated)",
    tag="reruns",
    response=RerunListSchema,
    query=PageArgsSchema,
    errors=(404, 422, 500, 503),
)
def list_reruns(request_id: str):
    """Return the request's reruns, oldest first."""
    args = page_args()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        rows, key = store.reruns_page(session, request_id, **args)
        items = [render.rerun(r) for r in rows]
    for item in items:
        item.pop("record", None)
    return jsonify(page_body(items, args["limit"], key))


@bp.get("/requests/<request_id>/reruns/<rerun_id>")
@operation(
    "Read one rerun, its record and its comparison",
    tag="reruns",
    response=RerunSchema,
    errors=(404, 422, 500, 503),
)
def get_rerun(request_id: str, rerun_id: str):
    """Return one rerun of the request."""
    reject_query()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        rerun = store.get_rerun(session, request_id, rerun_id)
        if rerun is None:
            raise NotFound(f"request {request_id} has no rerun with id '{rerun_id}'")
        return jsonify(render.rerun(rerun))
