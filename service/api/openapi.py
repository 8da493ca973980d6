"""The OpenAPI 3.1 document, generated from the routes and the marshmallow schemas they use."""

from __future__ import annotations

import re
from http import HTTPStatus
from importlib import metadata

from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin
from apispec.ext.marshmallow.common import resolve_schema_cls
from flask import Blueprint, Flask, current_app, jsonify
from marshmallow import Schema

from service.schemas import question_json_schema, register_openapi_types
from service.schemas.api import ProblemSchema

from .auth import PAGES_PREFIX, PUBLIC
from .docs import Operation, operation
from .errors import PROBLEM_MEDIA_TYPE

bp = Blueprint("openapi", __name__)

_PATH_PARAM = re.compile(r"<(?:[^:<>]+:)?([^<>]+)>")
_SKIP_METHODS = {"HEAD", "OPTIONS"}
BEARER_SCHEME = "bearer"


def _schema_name(schema) -> str | None:
    # Schemas narrowed with only/exclude are inlined rather than fighting over one name.
    if isinstance(schema, Schema) and (schema.only or schema.exclude):
        return None
    return resolve_schema_cls(schema).__name__.removesuffix("Schema")


def _version() -> str:
    try:
        return metadata.version("sizewise")
    except metadata.PackageNotFoundError:  # pragma: no cover - bare checkout
        return "0.0.0"


def _operation_dict(op: Operation, endpoint: str, *, secured: bool) -> dict:
    responses: dict[str, dict] = {}
    success: dict = {"description": HTTPStatus(op.status).phrase}
    if op.response is not None:
        success["content"] = {op.media_type: {"schema": op.response}}
    elif op.media_type.endswith("+json"):  # a JSON document of its own kind (a JSON Schema)
        success["content"] = {op.media_type: {"schema": {"type": "object"}}}
    elif op.media_type != "application/json":  # pages and pictures: a body that is not JSON
        body = {"type": "string", "contentMediaType": op.media_type}
        success["content"] = {op.media_type: {"schema": body}}
    if op.headers:
        success["headers"] = {
            name: {"description": text, "schema": {"type": "string"}}
            for name, text in op.headers.items()
        }
    responses[str(op.status)] = success
    if op.status == 202 and op.request_headers:
        responses["200"] = {
            "description": "The same Idempotency-Key and body were posted before",
            "content": {"application/json": {"schema": op.response}},
        }
    for code, text in op.also.items():
        other: dict = {"description": text}
        if code not in (204, 304) and op.response is not None:
            other["content"] = {op.media_type: {"schema": op.response}}
        responses[str(code)] = other
    # Every secured endpoint can answer 401 (no or bad token), 403 (role) and 429 (rate limit).
    codes = set(op.errors) | {500} | ({401, 403, 429} if secured else set())
    for code in sorted(codes):
        responses[str(code)] = {
            "description": HTTPStatus(code).phrase,
            "content": {PROBLEM_MEDIA_TYPE: {"schema": ProblemSchema}},
        }
    out: dict = {
        "operationId": endpoint.replace(".", "_"),
        "summary": op.summary,
        "tags": [op.tag],
        "responses": responses,
    }
    # An empty list overrides the document-wide requirement: the probes need no token.
    out["security"] = [{BEARER_SCHEME: []}] if secured else []
    if op.description:
        out["description"] = op.description
    parameters: list[dict] = []
    if op.query is not None:
        parameters.append({"in": "query", "schema": op.query})
    for name, text in op.request_headers.items():
        parameters.append(
            {"in": "header", "name": name, "description": text, "schema": {"type": "string"}}
        )
    if parameters:
        out["parameters"] = parameters
    if op.body is not None:
        out["requestBody"] = {
            "required": op.body_required,
            "content": {"application/json": {"schema": op.body}},
        }
    return out


def build_spec(app: Flask) -> dict:
    """Return the OpenAPI document of every route registered on ``app``."""
    plugin = MarshmallowPlugin(schema_name_resolver=_schema_name)
    spec = APISpec(
        title="sizewise",
        version=_version(),
        openapi_version="3.1.0",
        plugins=[plugin],
        info={
            "description": "Sample-size and power answers for study protocols. Every error is "
            "application/problem+json (RFC 9457)."
        },
    )
    register_openapi_types(plugin)  # needs the converter that APISpec's init just made
    spec.components.schema("Problem", schema=ProblemSchema)
    # The question is generated from the designs' declarations (OpenAPI 3.1 schemas are JSON
    # Schema 2020-12), not from QuestionSchema's fields, whose cell blocks are open objects.
    spec.components.schema("Question", component=question_component())
    spec.components.security_scheme(
        BEARER_SCHEME,
        {
            "type": "http",
            "scheme": "bearer",
            "description": "An API token (sw_...) issued by an admin; its role decides access.",
        },
    )
    for rule in sorted(app.url_map.iter_rules(), key=lambda r: r.rule):
        if rule.endpoint == "static" or rule.endpoint.startswith(PAGES_PREFIX):
            continue  # the desk's pages are for browsers, not part of the API
        view = app.view_functions[rule.endpoint]
        op: Operation | None = getattr(view, "openapi", None)
        if op is None:
            raise RuntimeError(f"route {rule.rule} ({rule.endpoint}) has no OpenAPI metadata")
        path = _PATH_PARAM.sub(r"{\1}", rule.rule)
        operations = {
            method.lower(): _operation_dict(op, rule.endpoint, secured=rule.endpoint not in PUBLIC)
            for method in sorted((rule.methods or set()) - _SKIP_METHODS)
        }
        parameters = [
            {
                "in": "path",
                "name": name,
                "required": True,
                "schema": {"type": "string", "pattern": "^[0-9a-f]{32}$"},
            }
            for name in sorted(rule.arguments)
        ]
        spec.path(path=path, operations=operations, parameters=parameters or None)
    return _link_questions(spec.to_dict())


def question_component() -> dict:
    """The question's JSON Schema as an OpenAPI component (no dialect keyword of its own)."""
    return {k: v for k, v in question_json_schema().items() if k != "$schema"}


def _link_questions(document: dict) -> dict:
    """Point every body member that holds a question at the generated Question component."""
    for component in document.get("components", {}).get("schemas", {}).values():
        member = component.get("properties", {}).get("question")
        if isinstance(member, dict) and member.get("x-question"):
            component["properties"]["question"] = {
                "$ref": "#/components/schemas/Question",
                "description": member.get("description", "The question."),
            }
    return document


@bp.get("/openapi.json")
@operation("This OpenAPI document", tag="meta", response=None)
def openapi_json():
    """Return the OpenAPI 3.1 document."""
    cached = current_app.extensions["sizewise"].get("openapi")
    if cached is None:
        cached = build_spec(current_app)
        current_app.extensions["sizewise"]["openapi"] = cached
    return jsonify(cached)
