"""Pieces the request, analysis and report views share: the request lookup, lists, Location."""

from __future__ import annotations

import re

from flask import Response, jsonify
from sqlalchemy.orm import Session

from service.schemas.requests import RequestQueryArgsSchema
from service.store import requests as store
from service.store.db import session_scope
from service.store.models import Request

from . import render
from .context import sessions
from .errors import NotFound
from .identity import visible_submitter
from .links import absolute
from .pagination import page_args

_ID_PATTERN = re.compile(r"^[0-9a-f]{32}$")


def load_request(session: Session, request_id: str) -> Request:
    """Return the request ``request_id`` or raise 404; a malformed id is not looked up."""
    row = store.get_request(session, request_id) if _ID_PATTERN.fullmatch(request_id) else None
    if row is None:
        raise _not_found(request_id)
    return row


def load_request_and_present(session: Session, request_id: str) -> tuple[Request, store.Present]:
    """The request and which of its children exist (one query), or 404 as ``load_request``."""
    well_formed = _ID_PATTERN.fullmatch(request_id)
    found = store.request_and_present(session, request_id) if well_formed else None
    if found is None:
        raise _not_found(request_id)
    return found


def _not_found(request_id: str) -> NotFound:
    return NotFound(f"no request with id '{request_id}'")


def visible_request_page() -> dict:
    """Read the list query and return the rendered page of requests the caller may see."""
    args = page_args(RequestQueryArgsSchema())
    with session_scope(sessions()) as session:
        result = store.list_requests(session, submitted_by=visible_submitter(), **args)
        return render.request_page(result, args["limit"])


def located(body: dict, status: int, location: str) -> Response:
    """Return ``body`` as JSON with ``status`` and a Location header naming the new resource."""
    response = jsonify(body)
    response.status_code = status
    response.headers["Location"] = absolute(location) if location.startswith("/") else location
    return response
