"""The catalogue of cells, the JSON Schemas of a question and of a request body, and
synchronous analytic calculations."""

from __future__ import annotations

from flask import Blueprint, jsonify

from service.schemas.api import CatalogueSchema, ResultRecordSchema
from service.schemas.requests import CalculationCreateSchema
from service.schemas.shared import shared

from .docs import operation
from .errors import ValidationFailed
from .feasibility import check_computable
from .io import load_body, reject_query

bp = Blueprint("calculations", __name__, url_prefix="/v1")


@bp.get("/catalogue")
@operation(
    "List the cells (outcome × layout), their analyses and fields",
    tag="catalogue",
    response=CatalogueSchema,
    errors=(422, 500),
)
def catalogue():
    """Return the catalogue the intake form is built from, generated from the designs."""
    reject_query()
    from service.schemas.catalogue import catalogue as build

    return jsonify(build())


@bp.get("/catalogue/question.schema.json")
@operation(
    "The JSON Schema (draft 2020-12) of a question",
    tag="catalogue",
    response=None,
    media_type="application/schema+json",
    description="Generated from the same field declarations as the validator and the "
    "catalogue; rules across fields are checked by the API (422 naming the field).",
    errors=(422, 500),
)
def question_schema():
    """Return the question's JSON Schema for form builders."""
    reject_query()
    from service.schemas.json_schema import question_json_schema

    response = jsonify(question_json_schema())
    response.mimetype = "application/schema+json"
    return response


@bp.get("/catalogue/request.schema.json")
@operation(
    "The JSON Schema (draft 2020-12) of a request body (POST /v1/requests)",
    tag="catalogue",
    response=None,
    media_type="application/schema+json",
    description="Generated from the request body's schema, with the question's JSON Schema "
    "under `$defs`; rules across fields are checked by the API (422 naming the field).",
    errors=(422, 500),
)
def request_schema():
    """Return the request body's JSON Schema for form builders and clients."""
    reject_query()
    from service.schemas.request_json_schema import request_json_schema

    response = jsonify(request_json_schema())
    response.mimetype = "application/schema+json"
    return response


@bp.post("/calculations")
@operation(
    "Answer an analytic question at once",
    tag="calculations",
    response=ResultRecordSchema,
    body=CalculationCreateSchema,
    description='The body is {"question": ...}, the same question document as a request\'s '
    "question and `sizewise compute FILE`. Simulation questions are refused here: submit them "
    "to /v1/requests.",
    errors=(400, 413, 415, 422, 500),
)
def calculate():
    """Validate an analytic question and return the engine's result record."""
    reject_query()
    raw, data = load_body(shared(CalculationCreateSchema))
    question = data["question"]
    if question.get("method") == "simulation":
        raise ValidationFailed(
            "simulation questions run in the queue; POST them to /v1/requests",
            errors={"question.method": ["'simulation' is answered through /v1/requests"]},
        )
    # The submission check answers an analytic question (its record) or refuses it, 422 by field.
    return jsonify(check_computable(question, (raw or {}).get("question")))
