"""API tokens, for admins: create (the secret is shown once), list (no secrets) and revoke."""

from __future__ import annotations

import re

from flask import Blueprint, jsonify
from marshmallow import Schema, fields

from service.schemas.requests import StrictSchema, length, one_of
from service.store import tokens as store
from service.store.db import session_scope
from service.store.models import TOKEN_ROLES, ApiToken

from .auth import token_cache
from .context import sessions
from .docs import operation
from .errors import NotFound, ValidationFailed
from .identity import current_actor
from .io import load_body, reject_query

bp = Blueprint("tokens", __name__, url_prefix="/v1")

_ID_PATTERN = re.compile(r"^[0-9a-f]{32}$")


class TokenCreateSchema(StrictSchema):
    """Body of POST /v1/tokens."""

    role = fields.String(required=True, validate=one_of(TOKEN_ROLES))
    name = fields.String(
        validate=length(1, store.NAME_MAX),
        metadata={
            "description": "Who holds the token; recorded as the actor in the audit trail. "
            "Optional: without it the token is named after its role, as `sizewise tokens "
            "create` names one without --name. Stored without leading and trailing white "
            f"space, 1-{store.NAME_MAX} printable characters: no control character (the "
            "pattern), and no format, private-use, unassigned or separator character other "
            "than the plain space (Python's str.isprintable).",
            "pattern": store.NAME_PATTERN,
        },
    )


class TokenSchema(Schema):
    """A token as admins see it: never its secret."""

    id = fields.String(required=True)
    role = fields.String(required=True)
    name = fields.String(required=True)
    created_at = fields.DateTime(required=True)
    last_used_at = fields.DateTime(allow_none=True)
    revoked_at = fields.DateTime(allow_none=True)


class TokenCreatedSchema(TokenSchema):
    """A new token with its secret: the only time the secret is shown."""

    token = fields.String(
        required=True, metadata={"description": "Send as 'Authorization: Bearer <token>'."}
    )


class TokenListSchema(Schema):
    """Every token, oldest first."""

    items = fields.List(fields.Nested(TokenSchema), required=True)


_TOKEN = TokenSchema()


def _actor() -> str:
    return current_actor()


def _render(row: ApiToken) -> dict:
    return _TOKEN.dump(row)


@bp.post("/tokens")
@operation(
    "Issue a token (its secret is shown in this answer only)",
    tag="tokens",
    status=201,
    response=TokenCreatedSchema,
    body=TokenCreateSchema,
    errors=(400, 401, 403, 413, 415, 422, 429, 500, 503),
)
def create_token():
    """Create a token of the posted role and return it with its secret."""
    reject_query()
    _raw, data = load_body(TokenCreateSchema())
    # As the command line: a token posted without a name is named after its role.
    body = issue_token(data["role"], data.get("name") or data["role"])
    response = jsonify(body)
    response.status_code = 201
    # The secret must not linger in caches or proxies.
    response.headers["Cache-Control"] = "no-store"
    return response


@bp.get("/tokens")
@operation(
    "List tokens (without their secrets)",
    tag="tokens",
    response=TokenListSchema,
    errors=(401, 403, 422, 429, 500, 503),
)
def list_tokens():
    """Return every token, oldest first, revoked ones included."""
    reject_query()
    return jsonify({"items": all_tokens()})


@bp.post("/tokens/<token_id>/revoke")
@operation(
    "Revoke a token (it stops working within 1 s on every API process; revoking twice keeps "
    "the first time)",
    tag="tokens",
    response=TokenSchema,
    errors=(401, 403, 404, 422, 429, 500, 503),
)
def revoke_token(token_id: str):
    """Revoke the token and return it."""
    reject_query()
    return jsonify(revoke(token_id))


def issue_token(role: str, name: str) -> dict:
    """Issue a token (the API's and the desk's way) and return it with its secret, shown once."""
    try:
        with session_scope(sessions()) as session:
            token_id, secret = store.create_token(session, role, name, actor=_actor())
            body = _render(store.get_token(session, token_id))
    except store.TokenInputError as exc:
        raise ValidationFailed(str(exc), errors={exc.field: [exc.message]}) from None
    body["token"] = secret
    return body


def all_tokens() -> list[dict]:
    """Every token, oldest first, without secrets."""
    with session_scope(sessions()) as session:
        return [_render(row) for row in store.list_tokens(session)]


def revoke(token_id: str) -> dict:
    """Revoke the token (404 when unknown) and return it; its desk sessions end with it."""
    with session_scope(sessions()) as session:
        row = (
            store.revoke_token(session, token_id, actor=_actor())
            if _ID_PATTERN.match(token_id)
            else None
        )
        if row is None:
            raise NotFound(f"no token with id '{token_id}'")
        rendered = _render(row)
    # Committed: this process stops accepting it now, the others within TOKEN_CACHE_SECONDS.
    token_cache().forget(token_id)
    return rendered
