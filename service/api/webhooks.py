"""Notifications: a submitting token's callback URL (one per token) and each request's delivery log.

``PUT /v1/webhook`` registers (or replaces) the caller's callback and answers its signing secret,
once; ``GET`` shows it without the secret; ``DELETE`` removes it. When one of the token's
requests is computed, failed, returned or approved, the workers POST a signed notification
(Standard Webhooks) to it; ``GET /v1/requests/{id}/deliveries`` lists what was sent and how
the receiver answered.
"""

from __future__ import annotations

from urllib.parse import urlsplit

from flask import Blueprint, jsonify
from marshmallow import ValidationError, fields, validates

from service.schemas.paging import next_field
from service.schemas.requests import StrictSchema, one_of
from service.store import webhooks as store
from service.store.db import session_scope
from service.store.models import MESSAGE_STATUSES

from .context import sessions, settings
from .docs import operation
from .errors import NotFound
from .identity import current_caller
from .io import load_body, reject_query
from .links import public_base
from .pagination import PageArgsSchema, page_args, page_body
from .views import load_request

bp = Blueprint("webhooks", __name__, url_prefix="/v1")

URL_MAX = 2000


# A TCP port 1-65535, as urlsplit reads it (no leading zeros needed).
_PORT = r"(6553[0-5]|655[0-2][0-9]|65[0-4][0-9]{2}|6[0-4][0-9]{3}|[1-5][0-9]{4}|[1-9][0-9]{0,3})"


def webhook_url_pattern(allow_http: bool) -> str:
    """The callback URLs ``url_problem`` accepts, as a pattern (for the OpenAPI document): the
    scheme, a host name or IPv4 address, an optional port, then a path or query of URI
    characters without a fragment. (The server also takes what the pattern leaves out, such as IPv6
    literals and non-ASCII paths; loopback hosts are refused outside a local run.)"""
    scheme = "https?" if allow_http else "https"
    uri = r"(%[0-9A-Fa-f]{2}|[A-Za-z0-9._~:/?@!$&'()*+,;=-])"  # RFC 3986, no fragment
    return rf"^{scheme}://[A-Za-z0-9._~-]+(:{_PORT})?([/?]{uri}*)?$"


def url_problem(url: str, allow_http: bool) -> str | None:
    """Why ``url`` cannot be a callback URL (None when it can)."""
    if len(url) > URL_MAX:
        return f"must be at most {URL_MAX} characters long"
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError as exc:
        return f"must be an absolute URL; {exc}"
    schemes = ("https", "http") if allow_http else ("https",)
    if parts.scheme not in schemes:
        allowed = " or ".join(f"{s}://" for s in schemes)
        return f"must start with {allowed}; got {parts.scheme or 'no scheme'!r}"
    if not parts.hostname:
        return "must name a host"
    if parts.username is not None or parts.password is not None:
        # Credentials in a URL end up in logs; the signature authenticates the sender instead.
        return "must not carry a user name or password; verify the signature instead"
    if parts.fragment:
        return "must not have a #fragment"
    if port == 0:
        return "must not use port 0"
    if not allow_http and store.is_loopback(parts.hostname):
        return "must not point at this machine (loopback) outside a local run"
    return None


EVENTS = [f"request.{name}" for name in ("computed", "failed", "returned", "approved")]


class WebhookPutSchema(StrictSchema):
    """Body of PUT /v1/webhook."""

    url = fields.String(
        required=True,
        metadata={"description": "Where notifications are POSTed (https; http in local runs)."},
    )

    @validates("url")
    def usable(self, value: str, **_kwargs) -> None:
        """Refuse a URL the workers could not, or should not, post to."""
        problem = url_problem(value, bool(settings().get("WEBHOOK_ALLOW_HTTP")))
        if problem:
            raise ValidationError(problem)


class WebhookSchema(StrictSchema):
    """The caller's callback (never its secret, except in the answer to PUT)."""

    id = fields.String(required=True)
    url = fields.Url(required=True)
    created_at = fields.AwareDateTime(required=True)
    updated_at = fields.AwareDateTime(required=True)
    events = fields.List(
        fields.String(validate=one_of(EVENTS)),
        required=True,
        metadata={"description": "The events notified."},
    )


class WebhookCreatedSchema(WebhookSchema):
    """The answer to PUT: the callback and its signing secret, shown this once."""

    secret = fields.String(
        required=True,
        metadata={
            "description": "whsec_ + base64 key: verify webhook-signature (HMAC-SHA256 of "
            "'{webhook-id}.{webhook-timestamp}.{body}') with it. Shown only here."
        },
    )


class AttemptSchema(StrictSchema):
    """One delivery attempt."""

    attempt = fields.Integer(required=True)
    url = fields.Url(required=True)
    at = fields.AwareDateTime(required=True)
    status_code = fields.Integer(required=True, allow_none=True)
    error = fields.String(required=True, allow_none=True)
    duration_ms = fields.Float(required=True)


class DeliverySchema(StrictSchema):
    """One notification of a request and its attempts."""

    id = fields.String(
        required=True,
        metadata={"description": "The webhook-id header, the same on every attempt."},
    )
    type = fields.String(required=True, validate=one_of(EVENTS))
    status = fields.String(required=True, validate=one_of(MESSAGE_STATUSES))
    created_at = fields.AwareDateTime(required=True)
    next_attempt_at = fields.AwareDateTime(required=True, allow_none=True)
    finished_at = fields.AwareDateTime(required=True, allow_none=True)
    attempts = fields.List(fields.Nested(AttemptSchema), required=True)


class DeliveryListSchema(StrictSchema):
    """GET /v1/requests/{id}/deliveries."""

    items = fields.List(fields.Nested(DeliverySchema), required=True)
    limit = fields.Integer(required=True)
    next = next_field(required=True)


_WEBHOOK = WebhookSchema()
_CREATED = WebhookCreatedSchema()
_DELIVERIES = DeliveryListSchema()


def _view(row, schema=_WEBHOOK, **extra) -> dict:
    return schema.dump(
        {
            "id": row.id,
            "url": row.url,
            "created_at": row.created_at,
            "updated_at": row.updated_at,
            "events": EVENTS,
            **extra,
        }
    )


@bp.put("/webhook")
@operation(
    "Register or replace this token's callback URL (the secret is shown in this answer only)",
    tag="webhooks",
    status=201,
    response=WebhookCreatedSchema,
    body=WebhookPutSchema,
    also={200: "Replaced: this token had a callback (the answer holds its new secret)"},
    description=(
        "201 when new, 200 when replaced. Every PUT issues a new signing secret; notifications "
        "still waiting are signed with it."
    ),
    errors=(400, 413, 415, 422, 500, 503),
)
def put_webhook():
    """Store the caller's callback URL and a fresh signing secret."""
    reject_query()
    _raw, data = load_body(WebhookPutSchema())
    with session_scope(sessions()) as session:
        row, created = store.register(
            session, current_caller().token_id, data["url"], public_base()
        )
        body = _view(row, _CREATED, secret=row.secret)
    return jsonify(body), 201 if created else 200


@bp.get("/webhook")
@operation(
    "Read this token's callback URL (without its secret)",
    tag="webhooks",
    response=WebhookSchema,
    errors=(404, 422, 500, 503),
)
def get_webhook():
    """Return the caller's callback, or 404."""
    reject_query()
    with session_scope(sessions()) as session:
        row = store.get_webhook(session, current_caller().token_id)
        if row is None:
            raise NotFound("this token has no callback URL; register one with PUT /v1/webhook")
        return jsonify(_view(row))


@bp.delete("/webhook")
@operation(
    "Remove this token's callback URL (notifications not yet delivered are dropped)",
    tag="webhooks",
    status=204,
    errors=(404, 422, 500, 503),
)
def delete_webhook():
    """Remove the caller's callback."""
    reject_query()
    with session_scope(sessions()) as session:
        if not store.unregister(session, current_caller().token_id):
            raise NotFound("this token has no callback URL")
    return "", 204


@bp.get("/requests/<request_id>/deliveries")
@operation(
    "The request's notifications and every delivery attempt (status codes, times)",
    tag="webhooks",
    response=DeliveryListSchema,
    query=PageArgsSchema,
    errors=(404, 422, 500, 503),
)
def list_deliveries(request_id: str):
    """Return the delivery log of the request, oldest first."""
    args = page_args()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        items, key = store.deliveries_for(session, request_id, **args)
    return jsonify(_DELIVERIES.dump(page_body(items, args["limit"], key)))
