"""The design catalogue and synchronous analytic calculations."""

from __future__ import annotations

from flask import Blueprint, jsonify

from service.engine import EngineError, QuestionError, compute
from service.schemas.api import CatalogueSchema, ResultRecordSchema
from service.schemas.requests import CalculationCreateSchema
from service.schemas.shared import shared

from .context import settings
from .docs import operation
from .errors import ApiError, ValidationFailed
from .feasibility import question_refused
from .io import load_body, reject_query

bp = Blueprint("calculations", __name__, url_prefix="/v1")


@bp.get("/designs")
@operation(
    "List the designs, their fields, formulas and simulation tests",
    tag="catalogue",
    response=CatalogueSchema,
    errors=(422, 500),
)
def designs():
    """Return the design catalogue the intake form is built from."""
    reject_query()
    from service.schemas.catalogue import catalogue

    return jsonify(catalogue())


@bp.post("/calculations")
@operation(
    "Answer an analytic question at once",
    tag="calculations",
    response=ResultRecordSchema,
    body=CalculationCreateSchema,
    description="Simulation questions are refused here: submit them to /v1/requests.",
    errors=(400, 413, 415, 422, 500),
)
def calculate():
    """Validate an analytic question and return the engine's result record."""
    reject_query()
    _raw, data = load_body(shared(CalculationCreateSchema))
    question = data["question"]
    if question.get("method") == "simulation":
        raise ValidationFailed(
            "simulation questions run in the queue; POST them to /v1/requests",
            errors={"question.method": ["'simulation' is answered through /v1/requests"]},
        )
    try:
        record = compute(question, budget=int(settings()["SIMULATION_BUDGET"]))
    except QuestionError as exc:
        raise question_refused(exc) from None
    except EngineError as exc:
        raise ApiError(str(exc), status=422, title="Cannot answer", slug="engine-error") from None
    return jsonify(record)
