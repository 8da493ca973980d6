"""A request's analyses: sensitivity grids and robustness panels, computed by workers.

An analysis runs once its request has a result. Asked for on a computed request it is published
at once; asked for earlier (``POST /v1/requests`` with ``analyses``, or here before the worker
is done) it is stored unpublished and the sweeper publishes it once the result exists. A
request that failed or was cancelled takes no new analysis (409).
"""

from __future__ import annotations

import copy
import logging

from flask import Blueprint, jsonify, url_for

from service.engine import EngineError, QuestionError, compute, draw_seed
from service.engine.explore import ROBUSTNESS_REPLICATES, analysis_cost, robustness_refusal
from service.schemas.requests import (
    AnalysisCreateSchema,
    AnalysisListSchema,
    AnalysisSchema,
)
from service.store import analyses as store
from service.store import jobs
from service.store import requests as request_store
from service.store.db import session_scope
from service.store.models import Analysis, Request

from . import render
from .auth import charge
from .context import sessions, settings
from .docs import operation
from .errors import Conflict, NotFound, ValidationFailed
from .feasibility import extreme_fields
from .identity import current_actor
from .io import load_body, reject_query
from .pagination import PageArgsSchema, page_args, page_body
from .views import load_request, located

log = logging.getLogger(__name__)

# Nested in the reports blueprint (endpoints ``reports.analyses.*``, paths under /v1).
bp = Blueprint("analyses", __name__)

_NO_NEW_ANALYSIS = ("failed", "cancelled")
ERRORS = (400, 404, 409, 413, 415, 422, 500, 503)


def analysis_params(
    question: dict, record: dict | None, kind: str, spec: dict, *, prefix: str = ""
) -> dict:
    """Validate one analysis against the request and return the params to store."""
    return priced_analysis(question, record, kind, spec, prefix=prefix)[0]


def priced_analysis(
    question: dict, record: dict | None, kind: str, spec: dict, *, prefix: str = ""
) -> tuple[dict, int]:
    """Validate one analysis against the request, price it; return (params, estimated draws).

    Errors are keyed ``prefix + field`` (``grid.effect.sd``, ``analyses.robustness``); a grid or
    panel over ``SIMULATION_BUDGET`` is refused (422) with its estimate.
    """
    design = question.get("design")
    if kind == "robustness":
        message = robustness_refusal(design)
        if message is not None:
            raise ValidationFailed(message, errors={f"{prefix}kind": [message]}, design=design)
        sim = question.get("simulation") or {}
        # A simulated request lends its seed and replicates; an analytic one gets a fresh seed.
        params = {
            "replicates": int(
                spec.get("replicates") or sim.get("replicates") or ROBUSTNESS_REPLICATES
            ),
            "seed": int(sim["seed"]) if sim.get("seed") is not None else draw_seed(),
        }
        field = f"{prefix}replicates"
    else:
        params = {"grid": spec["grid"]}
        field = f"{prefix}grid"
        _refuse_extreme_cells(spec["grid"], field)
    if kind == "robustness" and record is None and question.get("find") == "sample_size":
        # The panel runs at the n the request finds; until then the formula's n prices it.
        record = formula_record(question)
    try:
        estimate = analysis_cost(kind, params, question, record)
    except QuestionError as exc:
        key = exc.field if exc.field.startswith("grid") else "grid"
        raise ValidationFailed(str(exc), errors={f"{prefix}{key}": [exc.message]}) from None
    budget = int(settings()["SIMULATION_BUDGET"])
    if estimate > budget:
        message = (
            f"estimated cost {estimate:,} draws exceeds the per-simulation budget of "
            f"{budget:,}; use fewer cells or fewer replicates"
        )
        raise ValidationFailed(message, errors={field: [message]}, estimate=estimate, budget=budget)
    return params, int(estimate)


def _refuse_extreme_cells(grid: dict, field: str) -> None:
    """Refuse grid values whose magnitude no cell could compute with (as at submission)."""
    errors = {}
    for path, values in grid.items():
        extreme = [v for v in values if extreme_fields(v)] if isinstance(values, list) else []
        if extreme:
            errors[f"{field}.{path}"] = [
                f"values of magnitude above 1e100 or below 1e-100 leave double precision in the "
                f"computation; got {extreme[0]!r}"
            ]
    if errors:
        raise ValidationFailed(
            f"{len(errors)} grid axis (axes) hold values no cell could compute with", errors=errors
        )


def formula_record(question: dict) -> dict | None:
    """The formula's answer to ``question`` (its analytic counterpart), or None without one."""
    analytic = copy.deepcopy(question)
    analytic["method"] = "analytic"
    analytic.pop("simulation", None)
    try:
        return compute(analytic)
    except EngineError:
        return None


def _publish(analysis_id: str) -> bool:
    """Publish the analysis after the commit; False leaves it for the sweeper."""
    try:
        from workers.analysis_tasks import publish_analysis

        sent = publish_analysis(analysis_id, settings())
    except Exception:  # never fail a request that is already stored
        log.exception("publishing analysis %s failed; left for the sweeper", analysis_id)
        return False
    if sent:
        with session_scope(sessions()) as session:
            jobs.mark_published(session, "analysis", analysis_id)
    return sent


@bp.post("/requests/<request_id>/analyses")
@operation(
    "Ask for a sensitivity grid or a robustness panel of a request",
    tag="analyses",
    status=202,
    response=AnalysisSchema,
    body=AnalysisCreateSchema,
    description=(
        "Runs on a worker once the request is computed (at once if it already is). A grid "
        "re-solves the question at every combination of the listed values; a robustness panel "
        "(two_means, rank_sum) simulates the test under departures from the planned data. Refused (422) over "
        "the per-simulation budget, and (409) for a failed or cancelled request."
    ),
    errors=ERRORS,
    headers={"Location": "URL of the analysis"},
)
def create_analysis(request_id: str):
    """Store an analysis of the request and publish it when the request has a result."""
    reject_query()
    actor = current_actor()
    _raw, data = load_body(AnalysisCreateSchema())
    with session_scope(sessions()) as session:
        row = load_request(session, request_id)
        if row.status in _NO_NEW_ANALYSIS:
            raise Conflict(
                f"request '{request_id}' is {row.status}; it has no result to analyse",
                current_status=row.status,
            )
        result = request_store.result_for(session, request_id)
        record = result.record if result is not None else None
        params, estimate = priced_analysis(row.question, record, data["kind"], data)
        analysis_id = store.create_analysis(session, request_id, data["kind"], params, actor).id
        charge(session, [(data["kind"], analysis_id, estimate)])
    if record is not None:
        _publish(analysis_id)
    with session_scope(sessions()) as session:
        body = render.analysis(session.get(Analysis, analysis_id))
    return located(
        body,
        202,
        url_for("reports.analyses.get_analysis", request_id=request_id, analysis_id=analysis_id),
    )


@bp.get("/requests/<request_id>/analyses")
@operation(
    "List a request's analyses and their results",
    tag="analyses",
    response=AnalysisListSchema,
    query=PageArgsSchema,
    errors=(404, 422, 500, 503),
)
def list_analyses(request_id: str):
    """Return the request's analyses, oldest first, with their results."""
    args = page_args()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        rows, key = store.analyses_page(session, request_id, **args)
        return jsonify(page_body([render.analysis(a) for a in rows], args["limit"], key))


@bp.get("/requests/<request_id>/analyses/<analysis_id>")
@operation(
    "Read one analysis and its result",
    tag="analyses",
    response=AnalysisSchema,
    errors=(404, 422, 500, 503),
)
def get_analysis(request_id: str, analysis_id: str):
    """Return one analysis of the request."""
    reject_query()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        row = session.get(Analysis, analysis_id)
        if row is None or row.request_id != request_id:
            raise NotFound(f"request {request_id} has no analysis with id '{analysis_id}'")
        return jsonify(render.analysis(row))


# --- analyses and effect source posted with the request ----------------------------------


def store_submission(session, row: Request, body: dict, actor: str) -> list[tuple[str, str, int]]:
    """Store a submission's effect source and its analyses (unpublished until computed).

    Returns ``(kind, analysis id, estimated draws)`` of each analysis, for the token's budget.
    """
    if body.get("effect_source") is not None:
        row.effect_source = body["effect_source"]
    asked = body.get("analyses") or {}
    stored = []
    for kind, spec in (
        ("sensitivity", asked.get("sensitivity")),
        ("robustness", asked.get("robustness")),
    ):
        if not spec:
            continue
        params, estimate = priced_analysis(
            row.question,
            None,
            kind,
            spec if isinstance(spec, dict) else {},
            prefix=f"analyses.{kind}.",
        )
        stored.append(
            (kind, store.create_analysis(session, row.id, kind, params, actor).id, estimate)
        )
    return stored
