"""The OpenAPI 3.1 document, generated from the routes and the marshmallow schemas they use."""

from __future__ import annotations

import re
from http import HTTPStatus
from importlib import metadata

from apispec import APISpec
from apispec.ext.marshmallow import MarshmallowPlugin
from apispec.ext.marshmallow.common import resolve_schema_cls
from flask import Blueprint, Flask, current_app, jsonify
from marshmallow import Schema, fields

from service.schemas import register_openapi_types
from service.schemas.api import ProblemSchema
from service.schemas.catalogue import DECLARED_TYPES, JSON_TYPES
from service.schemas.data_models import FAMILIES
from service.schemas.fields import TEXT_PATTERN
from service.schemas.json_schema import camel, question_components
from service.schemas.records import ResultRecordSchema
from service.schemas.requests import (
    IDEMPOTENCY_DESCRIPTION,
    RobustnessPanelCreateSchema,
    RobustnessPanelParamsSchema,
    SensitivityGridCreateSchema,
    SensitivityGridParamsSchema,
)
from service.schemas.vocabulary import BLOCKS, layouts, outcomes
from service.store.models import (
    EXPLORATION_TYPES,
    MESSAGE_STATUSES,
    REQUEST_STATUSES,
    RERUN_STATUSES,
    TOKEN_ROLES,
)

from .auth import LINK_ENDPOINTS, LINK_PARAM, PAGES_PREFIX, PUBLIC
from .docs import Operation, operation
from .errors import PROBLEM_MEDIA_TYPE
from .webhooks import EVENTS as WEBHOOK_EVENTS
from .webhooks import URL_MAX as WEBHOOK_URL_MAX
from .webhooks import webhook_url_pattern

bp = Blueprint("openapi", __name__)

_PATH_PARAM = re.compile(r"<(?:[^:<>]+:)?([^<>]+)>")
_SKIP_METHODS = {"HEAD", "OPTIONS"}
BEARER_SCHEME = "bearer"
SCHEMAS = "#/components/schemas/"
# Enums named by their values (several members share them); others take their member's name.
ENUM_NAMES: dict[str, tuple] = {
    "RequestStatus": tuple(REQUEST_STATUSES),
    "JobStatus": tuple(RERUN_STATUSES),  # reruns and explorations
    "ExplorationType": tuple(EXPLORATION_TYPES),
    "TokenRole": tuple(TOKEN_ROLES),
    "DeliveryStatus": tuple(MESSAGE_STATUSES),
    "WebhookEvent": tuple(WEBHOOK_EVENTS),
    "Family": tuple(FAMILIES),
    "QuestionBlock": tuple(BLOCKS),
    "DeclaredFieldType": DECLARED_TYPES,
    "JsonType": JSON_TYPES,
}
# (full, summary): the full object is the summary and more (allOf), as a client reads it.
EXTENDS = (
    ("Request", "RequestSummary"),
    ("Exploration", "ExplorationSummary"),
    ("Rerun", "RerunItem"),
    ("RerunItem", "RerunLatest"),
    ("TokenCreated", "Token"),
    ("WebhookCreated", "Webhook"),
)
RATE_HEADERS = {
    "Retry-After": ("integer", "Seconds to wait before trying again.", True),
    "X-RateLimit-Limit": ("integer", "Calls allowed in the window (per token).", False),
    "X-RateLimit-Remaining": ("integer", "Calls left in the window.", False),
    "X-RateLimit-Reset": ("integer", "When the window resets (UNIX seconds).", False),
}


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


def _problem(code: int) -> dict:
    out: dict = {
        "description": HTTPStatus(code).phrase,
        "content": {PROBLEM_MEDIA_TYPE: {"schema": {"$ref": SCHEMAS + "Problem"}}},
    }
    if code == 409:
        out["description"] = (
            "Conflict: the request's status does not allow this; current_status names it and, "
            "for a review or cancel transition, allowed_from the statuses it is allowed from."
        )
    if code == 429:
        out["description"] = (
            "Too many requests: the per-token rate limit (or, for calls without a valid token, "
            "the per-address one) or the token's hourly simulation budget is used up."
        )
        out["headers"] = {
            name: {"description": text, "required": required, "schema": {"type": kind}}
            for name, (kind, text, required) in RATE_HEADERS.items()
        }
    return out


def _body_schema(op: Operation) -> dict:
    """The success body's schema: the response schema, else one for the media type."""
    if op.media_type == "image/png":  # a picture: bytes
        return {"type": "string", "format": "binary", "contentMediaType": op.media_type}
    if op.media_type.endswith("+json"):  # a JSON document of its own kind (a JSON Schema)
        return {"type": "object", "description": "A JSON Schema (draft 2020-12) document."}
    return {"type": "string", "contentMediaType": op.media_type}  # pages, SVG, metrics text


def _operation_dict(op: Operation, endpoint: str, *, secured: bool) -> dict:
    responses: dict[str, dict] = {}
    success: dict = {"description": HTTPStatus(op.status).phrase}
    if op.response is not None:
        success["content"] = {op.media_type: {"schema": op.response}}
    elif op.status != 204:
        success["content"] = {op.media_type: {"schema": _body_schema(op)}}
    if op.headers:
        success["headers"] = {
            name: {"description": text, "required": True, "schema": {"type": "string"}}
            for name, text in op.headers.items()
        }
    responses[str(op.status)] = success
    if op.status == 202 and op.request_headers:
        responses["200"] = {
            "description": "The same Idempotency-Key and body were posted before (by any "
            "token): the first request, as it is now",
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
        responses[str(code)] = _problem(code)
    out: dict = {
        "operationId": endpoint.replace(".", "_"),
        "summary": op.summary,
        "tags": [op.tag],
        "responses": responses,
    }
    # An empty list overrides the document-wide requirement: the probes need no token. The
    # report pages take a bearer token or a signed link (either one).
    if not secured:
        out["security"] = []
    elif endpoint in LINK_ENDPOINTS:
        # {}: no Authorization header when the signed `link` parameter is given, so a
        # generated client can open a report link with a client that holds no token.
        out["security"] = [{BEARER_SCHEME: []}, {}]
    else:
        out["security"] = [{BEARER_SCHEME: []}]
    description = op.description
    if endpoint in LINK_ENDPOINTS:
        description = (f"{description} " if description else "") + (
            "Opens with a bearer token or, with no Authorization header, with the signed `link` "
            "query parameter (POST /v1/requests/{request_id}/report-links)."
        )
    if description:
        out["description"] = description
    parameters: list[dict] = []
    if op.query is not None:
        parameters.append({"in": "query", "schema": op.query})
    if endpoint in LINK_ENDPOINTS:
        parameters.append(
            {
                "in": "query",
                "name": LINK_PARAM,
                "required": False,
                "description": "A signed report link (the `link` parameter of the url that POST "
                "/v1/requests/{request_id}/report-links returns), used instead of a bearer token; "
                "it opens this request's report, curve.svg and curve.png for 24 hours.",
                "schema": {
                    "type": "string",
                    "pattern": r"^[0-9a-f]{32}\.[0-9]{1,12}\.[0-9a-f]{64}$",
                },
            }
        )
    for name, text in op.request_headers.items():
        header: dict = {
            "in": "header",
            "name": name,
            "description": text,
            "schema": {"type": "string"},
        }
        if name == "Idempotency-Key":
            header["description"] = IDEMPOTENCY_DESCRIPTION
            header["schema"] = {"type": "string", "pattern": r"^[\x21-\x7e]{1,200}$"}
        parameters.append(header)
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
            "application/problem+json (RFC 9457). Calls counted by the per-token rate limit "
            "carry X-RateLimit-Limit, X-RateLimit-Remaining and X-RateLimit-Reset; a 429 "
            "carries Retry-After."
        },
    )
    register_openapi_types(plugin)  # needs the converter that APISpec's init just made
    plugin.converter.add_attribute_function(_dict_keys)
    plugin.map_to_openapi_type(fields.Url, "string", "uri")  # JSON Schema's name for a URL
    spec.components.schema("Problem", schema=ProblemSchema)
    # The question is generated from the designs' declarations (OpenAPI 3.1 schemas are JSON
    # Schema 2020-12), not from QuestionSchema's fields, whose cell blocks are open objects.
    for name, component in question_components().items():
        spec.components.schema(name, component=component)
    spec.components.schema("ResultRecord", schema=ResultRecordSchema)
    spec.components.schema("SensitivityGridCreate", schema=SensitivityGridCreateSchema)
    spec.components.schema("RobustnessPanelCreate", schema=RobustnessPanelCreateSchema)
    spec.components.schema("SensitivityGridParams", schema=SensitivityGridParamsSchema)
    spec.components.schema("RobustnessPanelParams", schema=RobustnessPanelParamsSchema)
    spec.components.schema(
        "ExplorationParams",
        component={
            "description": "What an exploration runs with, by its type (the exploration's "
            "`type` member says which).",
            "oneOf": [
                {"$ref": SCHEMAS + "SensitivityGridParams"},
                {"$ref": SCHEMAS + "RobustnessPanelParams"},
            ],
        },
    )
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
    document = spec.to_dict()
    _cell_words(document)
    _webhook_url(document, bool(app.extensions["sizewise"]["config"].get("WEBHOOK_ALLOW_HTTP")))
    _link_questions(document)
    _explorations_by_type(document)
    _analytic_calculations(document)
    _text_patterns(document)
    _name_types(document)
    _extend(document)
    return document


def _dict_keys(self, field, **kwargs) -> dict:
    """A Dict's keys as ``propertyNames`` (apispec writes only its values)."""
    if isinstance(field, fields.Dict) and field.key_field is not None:
        return {"propertyNames": self.field2property(field.key_field)}
    return {}


def _cell_words(document: dict) -> None:
    """The list filters ``outcome`` and ``layout`` take the registered cells' words."""
    words = {"outcome": list(outcomes()), "layout": list(layouts())}
    for item in document.get("paths", {}).values():
        for method, op in item.items():
            if method == "parameters":
                continue
            for parameter in op.get("parameters", []):
                if parameter.get("in") == "query" and parameter.get("name") in words:
                    parameter["schema"] = {
                        **parameter["schema"],
                        "type": "string",
                        "enum": words[parameter["name"]],
                    }


def _webhook_url(document: dict, allow_http: bool) -> None:
    """The callback URL's pattern: the scheme this service accepts and the shape url_problem
    checks (a host, an optional port 1-65535, no user name, password or fragment)."""
    url = document["components"]["schemas"]["WebhookPut"]["properties"]["url"]
    url["pattern"] = webhook_url_pattern(allow_http)
    url["maxLength"] = WEBHOOK_URL_MAX
    url["description"] = (
        url.get("description", "")
        + " An absolute URL naming a host, without a user name, password or #fragment"
        + ("." if allow_http else ", not pointing at this machine (loopback).")
    )


# Strings that are not free text: their own pattern, format or values say what they hold.
_NOT_TEXT = ("enum", "const", "pattern", "format", "contentMediaType")


def _text_patterns(document: dict) -> None:
    """Every free-text string the server reads says that control characters are refused
    (``TEXT_PATTERN``): body members and keys, query and header values (io.text_problem).
    Only what a request carries: an answer may echo what was refused (a problem's instance)."""
    schemas = document.get("components", {}).get("schemas", {})
    inputs: list = []
    for item in document.get("paths", {}).values():
        for method, op in item.items():
            if method == "parameters":
                continue
            inputs.extend(p.get("schema", {}) for p in op.get("parameters", []))
            for media in ((op.get("requestBody") or {}).get("content") or {}).values():
                inputs.append(media.get("schema", {}))
    reached: set[str] = set()

    def refs(node) -> None:
        if isinstance(node, list):
            for item in node:
                refs(item)
        elif isinstance(node, dict):
            ref = node.get("$ref")
            if isinstance(ref, str) and ref.startswith(SCHEMAS):
                name = ref.removeprefix(SCHEMAS)
                if name not in reached and name in schemas:
                    reached.add(name)
                    refs(schemas[name])
            for value in node.values():
                refs(value)

    refs(inputs)

    def visit(node) -> None:
        if isinstance(node, list):
            for item in node:
                visit(item)
            return
        if not isinstance(node, dict):
            return
        kinds = node.get("type")
        kinds = kinds if isinstance(kinds, list) else [kinds]
        if "string" in kinds and not any(key in node for key in _NOT_TEXT):
            node["pattern"] = TEXT_PATTERN
        for key, value in node.items():
            if key not in ("examples", "example", "default", "enum", "const"):
                visit(value)

    visit(inputs)
    for name in sorted(reached):
        visit(schemas[name])


def _link_questions(document: dict) -> None:
    """Point every member that holds a question at the generated Question component, and each
    member sent unchanged (``x-component``, e.g. a stored record) at the component it is."""
    for component in document.get("components", {}).get("schemas", {}).values():
        for name, member in (component.get("properties") or {}).items():
            if not isinstance(member, dict):
                continue
            target = "Question" if member.get("x-question") else member.get("x-component")
            if target:
                ref = {"$ref": SCHEMAS + target}
                typed: dict = ref
                if "null" in (member.get("type") or ()):
                    typed = {"anyOf": [ref, {"type": "null"}]}
                component["properties"][name] = {
                    **typed,
                    "description": member.get("description", f"The {target}."),
                }


def _analytic_calculations(document: dict) -> None:
    """POST /v1/calculations answers analytic questions only: no method simulation and no
    simulation block (a data model alone is simulated); simulations go to /v1/requests."""
    body = document["components"]["schemas"]["CalculationCreate"]
    body["dependentSchemas"] = {
        "question": {
            "properties": {
                "question": {
                    "properties": {
                        "method": {"anyOf": [{"const": "analytic"}, {"type": "null"}]},
                        "simulation": {"type": "null"},
                    }
                }
            }
        }
    }


def _explorations_by_type(document: dict) -> None:
    """The exploration body is one of two shapes, told apart by ``type``."""
    schemas = document["components"]["schemas"]
    variants = {
        "sensitivity_grid": "SensitivityGridCreate",
        "robustness_panel": "RobustnessPanelCreate",
    }
    schemas["ExplorationCreate"] = {
        "description": schemas["ExplorationCreate"].get("description", ""),
        "oneOf": [{"$ref": SCHEMAS + name} for name in variants.values()],
        "discriminator": {
            "propertyName": "type",
            "mapping": {kind: SCHEMAS + name for kind, name in variants.items()},
        },
    }


def _name_types(document: dict) -> None:
    """Give every enum and nested object a component of its own, defined once and referenced.

    An enum with the values of an ``ENUM_NAMES`` entry takes that name; another takes its
    member's name (``find`` -> ``Find``), prefixed by its owner's when that name is taken. One
    value set is one component wherever it is used; a one-value enum is a ``const``. A nested
    object becomes ``<Owner><Member>``. A member that may be null says so with
    ``anyOf: [$ref, {"type": "null"}]``.
    """
    schemas: dict = document["components"]["schemas"]
    by_values: dict[tuple, str] = {}
    for name, values in ENUM_NAMES.items():
        schemas[name] = {"type": "string", "enum": list(values)}
        by_values[("string", *values)] = name

    def free(*candidates: str) -> str:
        for candidate in candidates:
            if candidate not in schemas:
                return candidate
        base, n = candidates[-1], 2
        while f"{base}{n}" in schemas:
            n += 1
        return f"{base}{n}"

    def typed(name: str, nullable: bool, meta: dict) -> dict:
        ref = {"$ref": SCHEMAS + name}
        out = {"anyOf": [ref, {"type": "null"}]} if nullable else ref
        return {**out, **meta}

    def fix(schema, owner: str, member: str | None):
        if not isinstance(schema, dict) or "$ref" in schema:
            return schema
        out = dict(schema)
        for key in ("anyOf", "oneOf", "allOf"):
            if key in out:
                out[key] = [fix(branch, owner, member) for branch in out[key]]
        kinds = out.get("type")
        kinds = list(kinds) if isinstance(kinds, list) else ([kinds] if kinds else [])
        nullable = "null" in kinds
        base = [k for k in kinds if k != "null"]
        if base == ["object"]:  # apispec writes a Dict's Length as a string's keywords
            for short, long in (("minLength", "minProperties"), ("maxLength", "maxProperties")):
                if short in out:
                    out[long] = out.pop(short)
        meta = {k: out[k] for k in ("description", "default", "title") if k in out}
        if "enum" in out and member is not None:
            values = [v for v in out["enum"] if v is not None]
            nullable = nullable or None in out["enum"]
            kind = base[0] if base else "string"
            if len(values) == 1 and not nullable:
                out.pop("enum")
                return {**out, "type": kind, "const": values[0]}
            key = (kind, *values)
            name = by_values.get(key)
            if name is None:
                name = free(camel(member), owner + camel(member))
                schemas[name] = {"type": kind, "enum": values}
                by_values[key] = name
            return typed(name, nullable, meta)
        if out.get("properties") and member is not None:
            name = free(owner + camel(member))
            inner = {k: v for k, v in out.items() if k not in ("description", "default", "title")}
            inner["type"] = "object"
            schemas[name] = inner
            schemas[name] = fix_component(inner, name)
            return typed(name, nullable, meta)
        if "properties" in out:
            out["properties"] = {k: fix(v, owner, k) for k, v in out["properties"].items()}
        if isinstance(out.get("items"), dict):
            out["items"] = fix(out["items"], owner, f"{member or ''}_item")
        if isinstance(out.get("additionalProperties"), dict):
            out["additionalProperties"] = fix(
                out["additionalProperties"], owner, f"{member or ''}_value"
            )
        return out

    def fix_component(schema: dict, name: str) -> dict:
        out = dict(schema)
        for key in ("anyOf", "oneOf", "allOf"):
            if key in out:
                out[key] = [fix(branch, name, None) for branch in out[key]]
        if "properties" in out:
            out["properties"] = {k: fix(v, name, k) for k, v in out["properties"].items()}
        return out

    for name in list(schemas):
        if name not in ENUM_NAMES:
            schemas[name] = fix_component(schemas[name], name)
    for item in document.get("paths", {}).values():
        for method, op in item.items():
            if method == "parameters":
                continue
            for parameter in op.get("parameters", []):
                parameter["schema"] = fix(parameter.get("schema", {}), "", parameter["name"])
            for response in op.get("responses", {}).values():
                for media in (response.get("content") or {}).values():
                    media["schema"] = fix(media.get("schema", {}), "", None)


def _extend(document: dict) -> None:
    """Write each full object as its summary and the members it adds (``allOf``)."""
    schemas = document["components"]["schemas"]
    for full, summary in EXTENDS:
        whole, part = schemas[full], schemas[summary]
        if "allOf" in whole or "allOf" in part:
            part = _flat(schemas, summary)
        own = {k: v for k, v in whole["properties"].items() if k not in part["properties"]}
        extra: dict = {"type": "object", "properties": own}
        required = [k for k in whole.get("required", []) if k in own]
        if required:
            extra["required"] = required
        keep = {k: v for k, v in whole.items() if k in ("description", "title")}
        schemas[full] = {**keep, "allOf": [{"$ref": SCHEMAS + summary}, extra]}
        # A closed summary would refuse the members the full object adds (allOf checks each
        # part on the whole body): answers are open, a client ignores what it does not know.
        schemas[summary].pop("additionalProperties", None)


def _flat(schemas: dict, name: str) -> dict:
    """The properties of a component written with allOf, merged."""
    schema = schemas[name]
    if "allOf" not in schema:
        return schema
    properties: dict = {}
    for branch in schema["allOf"]:
        inner = _flat(schemas, branch["$ref"].rsplit("/", 1)[-1]) if "$ref" in branch else branch
        properties.update(inner.get("properties", {}))
    return {"properties": properties}


@bp.get("/openapi.json")
@operation(
    "This OpenAPI document",
    tag="meta",
    response={"type": "object", "description": "An OpenAPI 3.1 document."},
    description="Public (no token), so a client generator can read it by URL.",
)
def openapi_json():
    """Return the OpenAPI 3.1 document."""
    cached = current_app.extensions["sizewise"].get("openapi")
    if cached is None:
        cached = build_spec(current_app)
        current_app.extensions["sizewise"]["openapi"] = cached
    return jsonify(cached)
