"""Reading bodies and query strings: JSON objects only, unknown fields refused."""

from __future__ import annotations

import json
from typing import Any

from flask import request
from marshmallow import Schema

from .errors import ApiError, ValidationFailed, flatten_errors

JSON_TYPES = ("application/json",)


def raw_json_body(*, optional: bool = False) -> dict | None:
    """Return the posted JSON object; None when ``optional`` and the body is empty."""
    data = request.get_data(cache=True)
    if optional and not data.strip():
        return None
    mimetype = request.mimetype or ""
    if mimetype not in JSON_TYPES and not mimetype.endswith("+json"):
        raise ApiError(
            f"the body must be application/json; got {mimetype or 'no Content-Type'}",
            status=415,
            title="Unsupported media type",
            slug="unsupported-media-type",
        )
    try:
        body = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        raise ApiError(
            f"the body is not valid JSON: {exc}", title="Malformed JSON", slug="malformed-json"
        ) from None
    if not isinstance(body, dict):
        raise ValidationFailed(
            f"the body must be a JSON object; got {type(body).__name__}",
            errors={"body": ["must be a JSON object"]},
        )
    return body


def load_body(schema: Schema, *, optional: bool = False) -> tuple[dict | None, dict]:
    """Return (raw body, loaded data) for ``schema``; an empty optional body loads as {}."""
    raw = raw_json_body(optional=optional)
    return raw, schema.load(raw or {})


def load_query(schema: Schema) -> dict[str, Any]:
    """Return the query string loaded by ``schema``; repeated or unknown parameters are refused."""
    repeated = [k for k, v in request.args.lists() if len(v) > 1]
    if repeated:
        raise ValidationFailed(
            "each query parameter may be given once",
            errors={f"query.{k}": ["given more than once"] for k in repeated},
        )
    errors = schema.validate(request.args.to_dict())
    if errors:
        flat = flatten_errors(errors)
        raise ValidationFailed(
            f"{len(flat)} query parameter(s) failed validation: {', '.join(sorted(flat))}",
            errors={f"query.{k}": v for k, v in flat.items()},
        )
    return schema.load(request.args.to_dict())


def reject_query() -> None:
    """Refuse any query parameter on an endpoint that takes none."""
    if request.args:
        raise ValidationFailed(
            "this endpoint takes no query parameters",
            errors={f"query.{k}": ["unknown parameter"] for k in request.args},
        )
