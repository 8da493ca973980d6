"""Cursor pagination of the lists: ``limit`` and an opaque ``cursor``, and an absolute ``next`` link.

A cursor is the key (creation time, id) of the last row a page showed, base64url-encoded; it is
opaque to clients, who follow ``next`` until it is null.
"""

from __future__ import annotations

import base64
import binascii
import json
from datetime import datetime

from flask import request

from service.schemas.paging import cursor_field, limit_field
from service.schemas.requests import StrictSchema
from service.store.paging import Key

from .errors import ValidationFailed
from .io import load_query
from .links import link

_CURSOR_HELP = "not a cursor this API issued; follow the 'next' link of the previous page"


class PageArgsSchema(StrictSchema):
    """Query parameters of a paginated list."""

    limit = limit_field()
    cursor = cursor_field()


def encode_cursor(key: Key) -> str:
    """The opaque cursor of a row key."""
    at, ident = key
    text = json.dumps([at.isoformat(), ident], separators=(",", ":"))
    return base64.urlsafe_b64encode(text.encode()).decode().rstrip("=")


def decode_cursor(cursor: str | None) -> Key | None:
    """The row key of a cursor; 422 on ``query.cursor`` when it was not issued here."""
    if cursor is None:
        return None
    try:
        text = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4)).decode()
        at, ident = json.loads(text)
        moment = datetime.fromisoformat(at)
        if moment.tzinfo is None or not isinstance(ident, str):
            raise ValueError("incomplete key")
    except (binascii.Error, UnicodeDecodeError, ValueError, TypeError):
        raise ValidationFailed(
            f"query parameter cursor is {_CURSOR_HELP}", errors={"query.cursor": [_CURSOR_HELP]}
        ) from None
    return moment, ident


def page_args(schema: StrictSchema | None = None) -> dict:
    """Load the list's query; ``after`` holds the decoded cursor (None on the first page)."""
    args = load_query(schema or PageArgsSchema())
    args["after"] = decode_cursor(args.pop("cursor", None))
    return args


def next_link(key: Key | None) -> str | None:
    """The absolute URL of the next page (same filters and limit), or None after the last."""
    if key is None:
        return None
    args = request.args.to_dict()
    args["cursor"] = encode_cursor(key)
    return link(request.endpoint, **(request.view_args or {}), **args)


def page_body(items: list, limit: int, key: Key | None, **extra) -> dict:
    """The body of one page: items, limit, next (and anything else, e.g. total)."""
    return {"items": items, "limit": limit, "next": next_link(key), **extra}
