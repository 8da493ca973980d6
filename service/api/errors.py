"""problem+json (RFC 9457) errors: one shape for every failure the API returns.

    ApiError                  raised by views; carries status, title, detail and field errors
    ├── ValidationFailed      422, ``errors`` keyed by dotted field path
    └── Conflict              409, names the request's current status

Handlers turn these, marshmallow's ValidationError, werkzeug's HTTPException, database outages
(503) and anything unexpected (500, logged, no traceback in the body) into problem documents.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from typing import Any

from flask import Flask, Response, json, request
from marshmallow import ValidationError
from sqlalchemy.exc import DBAPIError, InterfaceError, OperationalError
from werkzeug.exceptions import HTTPException

log = logging.getLogger(__name__)

PROBLEM_MEDIA_TYPE = "application/problem+json"
TYPE_PREFIX = "urn:sizewise:problem:"


class ApiError(Exception):
    """An error a view raises on purpose; rendered as a problem document."""

    status = 400
    slug = "bad-request"
    title = "Bad request"

    def __init__(
        self,
        detail: str,
        *,
        status: int | None = None,
        title: str | None = None,
        slug: str | None = None,
        errors: Mapping[str, list[str]] | None = None,
        headers: Mapping[str, str] | None = None,
        **extra: Any,
    ):
        super().__init__(detail)
        self.detail = detail
        self.status = status or self.status
        self.title = title or self.title
        self.slug = slug or self.slug
        self.errors = dict(errors) if errors else None
        self.headers = dict(headers or {})
        self.extra = extra


class ValidationFailed(ApiError):
    """The input failed validation (422); ``errors`` names each field."""

    status = 422
    slug = "validation-error"
    title = "Invalid input"


class Conflict(ApiError):
    """The action does not fit the resource's current state (409)."""

    status = 409
    slug = "conflict"
    title = "Not allowed in the current state"


class NotFound(ApiError):
    """No such resource (404)."""

    status = 404
    slug = "not-found"
    title = "Not found"


def flatten_errors(messages: Any, prefix: str = "") -> dict[str, list[str]]:
    """Flatten marshmallow's nested messages to ``{"dotted.path": [message, ...]}``."""
    if isinstance(messages, Mapping):
        out: dict[str, list[str]] = {}
        for key, value in messages.items():
            # _schema errors belong to the object that holds them.
            path = prefix if key == "_schema" else (f"{prefix}.{key}" if prefix else str(key))
            for p, msgs in flatten_errors(value, path).items():
                out.setdefault(p, []).extend(msgs)
        return out
    if isinstance(messages, (list, tuple)):
        if all(isinstance(m, str) for m in messages):
            return {prefix or "body": list(messages)}
        out = {}
        for item in messages:
            for p, msgs in flatten_errors(item, prefix).items():
                out.setdefault(p, []).extend(msgs)
        return out
    return {prefix or "body": [str(messages)]}


def problem(
    status: int,
    title: str,
    detail: str,
    *,
    slug: str | None = None,
    errors: Mapping[str, list[str]] | None = None,
    headers: Mapping[str, str] | None = None,
    **extra: Any,
) -> Response:
    """Return an application/problem+json response."""
    body: dict[str, Any] = {
        "type": TYPE_PREFIX + slug if slug else "about:blank",
        "title": title,
        "status": status,
        "detail": detail,
        "instance": request.path if request else "",
    }
    if errors:
        body["errors"] = {k: list(v) for k, v in sorted(errors.items())}
    body.update(extra)
    response = Response(json.dumps(body), status=status, mimetype=PROBLEM_MEDIA_TYPE)
    for key, value in (headers or {}).items():
        response.headers[key] = value
    return response


def _api_error(exc: ApiError) -> Response:
    return problem(
        exc.status,
        exc.title,
        exc.detail,
        slug=exc.slug,
        errors=exc.errors,
        headers=exc.headers,
        **exc.extra,
    )


def _validation(exc: ValidationError) -> Response:
    errors = flatten_errors(exc.messages)
    fields = ", ".join(sorted(errors))
    return problem(
        422,
        ValidationFailed.title,
        f"{len(errors)} field(s) failed validation: {fields}",
        slug=ValidationFailed.slug,
        errors=errors,
    )


def _http(exc: HTTPException) -> Response:
    headers = {}
    if exc.code == 405:
        allow = dict(exc.get_headers()).get("Allow")
        if allow:
            headers["Allow"] = allow
    return problem(exc.code or 500, exc.name, exc.description or exc.name, headers=headers)


def _database(exc: DBAPIError) -> Response:
    if isinstance(exc, (OperationalError, InterfaceError)) or exc.connection_invalidated:
        log.error("database unavailable: %s", exc.orig)
        return problem(
            503,
            "Service unavailable",
            "the database is unreachable; try again shortly",
            slug="database-unavailable",
            headers={"Retry-After": "30"},
        )
    return _unexpected(exc)


def _unexpected(exc: Exception) -> Response:
    log.exception("unhandled error on %s %s", request.method, request.path)
    return problem(
        500,
        "Internal server error",
        "the service failed to handle this request; the error has been logged",
        slug="internal-error",
    )


def register_error_handlers(app: Flask) -> None:
    """Install the problem+json handlers on ``app``."""
    app.register_error_handler(ApiError, _api_error)
    app.register_error_handler(ValidationError, _validation)
    app.register_error_handler(HTTPException, _http)
    app.register_error_handler(DBAPIError, _database)
    app.register_error_handler(Exception, _unexpected)
