"""A request's explorations: sensitivity grids and robustness panels, computed by workers.

An exploration runs once its request has a result. Asked for on a computed request it is
published at once; asked for earlier (``POST /v1/requests`` with ``explorations``, or here
before the worker is done) it is stored unpublished and the sweeper publishes it once the
result exists. A request that failed or was cancelled takes no new exploration (409).
"""

from __future__ import annotations

import copy

from flask import Blueprint, jsonify, url_for

from service.engine import EngineError, compute, draw_seed
from service.schemas.explorations import ExplorationRefused, price
from service.schemas.requests import (
    ExplorationCreateSchema,
    ExplorationListSchema,
    ExplorationSchema,
)
from service.schemas.shared import shared
from service.store import explorations as store
from service.store import requests as request_store
from service.store.db import session_scope
from service.store.models import Exploration, Request

from .auth import charge
from .context import sessions, settings
from .docs import operation
from .errors import Conflict, NotFound, ValidationFailed
from .identity import current_actor
from .io import load_body, reject_query
from .pagination import PageArgsSchema, page_args, page_body
from .publishing import publish_job
from .views import load_request, located

# Nested in the reports blueprint (endpoints ``reports.explorations.*``, paths under /v1).
bp = Blueprint("explorations", __name__)

_NO_NEW_EXPLORATION = ("failed", "cancelled")
ERRORS = (400, 404, 409, 413, 415, 422, 500, 503)


def render(row: Exploration) -> dict:
    """One exploration as the API shows it, with its result."""
    return shared(ExplorationSchema).dump(row)


def priced(
    question: dict, record: dict | None, item: dict, *, prefix: str = ""
) -> tuple[dict, int]:
    """Check one exploration against the request and price it; return (params, draws).

    A 422 names the fields as ``prefix + field`` (``grid.effect.difference``,
    ``explorations.0.type``); a grid or panel over ``SIMULATION_BUDGET`` is refused with its
    estimate.
    """
    if (
        item["type"] == "robustness_panel"
        and record is None
        and question.get("find") == "sample_size"
    ):
        # The panel runs at the n the request finds; until then the formula's n prices it.
        record = counterpart_record(question)
    try:
        return price(
            question,
            record,
            item,
            budget=int(settings()["SIMULATION_BUDGET"]),
            seed=draw_seed(),
        )
    except ExplorationRefused as exc:
        errors = {f"{prefix}{key}": messages for key, messages in exc.errors.items()}
        raise ValidationFailed(exc.message, errors=errors, **exc.extra) from None


def counterpart_record(question: dict) -> dict | None:
    """The analytic counterpart's answer to ``question``, or None without one."""
    analytic = copy.deepcopy(question)
    analytic["method"] = "analytic"
    analytic.pop("simulation", None)
    try:
        return compute(analytic)
    except EngineError:
        return None


@bp.post("/requests/<request_id>/explorations")
@operation(
    "Ask for a sensitivity grid or a robustness panel of a request",
    tag="explorations",
    status=202,
    response=ExplorationSchema,
    body=ExplorationCreateSchema,
    description=(
        "Runs on a worker once the request is computed (at once if it already is). A "
        "sensitivity_grid re-solves the question at every combination of the listed values; a "
        "robustness_panel simulates the planned test under departures from the planned data "
        "(continuous or ordinal outcome, two groups). Refused (422) over the per-simulation "
        "budget, and (409) for a failed or cancelled request."
    ),
    errors=ERRORS,
    headers={"Location": "URL of the exploration"},
)
def create_exploration(request_id: str):
    """Store an exploration of the request and publish it when the request has a result."""
    reject_query()
    _raw, item = load_body(shared(ExplorationCreateSchema))
    exploration_id = start_exploration(request_id, item)
    with session_scope(sessions()) as session:
        body = render(session.get(Exploration, exploration_id))
    return located(
        body,
        202,
        url_for(
            "reports.explorations.get_exploration",
            request_id=request_id,
            exploration_id=exploration_id,
        ),
    )


def start_exploration(request_id: str, item: dict) -> str:
    """Store a validated exploration item (type, grid or replicates), charge and publish it.

    The API's and the desk's one way in: 409 for a failed or cancelled request, 422 for an
    exploration the request cannot take or over the budget. Returns the exploration id.
    """
    actor = current_actor()
    with session_scope(sessions()) as session:
        row = load_request(session, request_id)
        if row.status in _NO_NEW_EXPLORATION:
            raise Conflict(
                f"request '{request_id}' is {row.status}; it has no result to explore",
                current_status=row.status,
            )
        result = request_store.result_for(session, request_id)
        record = result.record if result is not None else None
        params, estimate = priced(row.question, record, item)
        created = store.create_exploration(session, request_id, item["type"], params, actor)
        exploration_id = created.id
        charge(session, [(created.stored_kind, exploration_id, estimate)])
    if record is not None:
        publish_job("exploration", exploration_id)
    return exploration_id


@bp.get("/requests/<request_id>/explorations")
@operation(
    "List a request's explorations and their results",
    tag="explorations",
    response=ExplorationListSchema,
    query=PageArgsSchema,
    errors=(404, 422, 500, 503),
)
def list_explorations(request_id: str):
    """Return the request's explorations, oldest first, with their results."""
    args = page_args()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        rows, key = store.explorations_page(session, request_id, **args)
        return jsonify(page_body([render(e) for e in rows], args["limit"], key))


@bp.get("/requests/<request_id>/explorations/<exploration_id>")
@operation(
    "Read one exploration and its result",
    tag="explorations",
    response=ExplorationSchema,
    errors=(404, 422, 500, 503),
)
def get_exploration(request_id: str, exploration_id: str):
    """Return one exploration of the request."""
    reject_query()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        row = session.get(Exploration, exploration_id)
        if row is None or row.request_id != request_id:
            raise NotFound(f"request {request_id} has no exploration with id '{exploration_id}'")
        return jsonify(render(row))


# --- explorations and effect source posted with the request ------------------------------


def store_submission(session, row: Request, body: dict, actor: str) -> list[tuple[str, str, int]]:
    """Store a submission's effect source and its explorations (unpublished until computed).

    Returns ``(stored kind, exploration id, estimated draws)`` of each, for the token's budget.
    """
    if body.get("effect_source") is not None:
        row.effect_source = body["effect_source"]
    stored = []
    for index, item in enumerate(body.get("explorations") or []):
        params, estimate = priced(row.question, None, item, prefix=f"explorations.{index}.")
        created = store.create_exploration(session, row.id, item["type"], params, actor)
        stored.append((created.stored_kind, created.id, estimate))
    return stored
