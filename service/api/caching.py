"""Conditional GET: a strong ETag over the body, so a client that polls pays for changes only."""

from __future__ import annotations

import hashlib

from flask import Response, request


def conditional(response: Response) -> Response:
    """Tag ``response`` with the SHA-256 of its body; answer 304 when If-None-Match has it."""
    response.set_etag(hashlib.sha256(response.get_data()).hexdigest())
    # Behind a bearer token: caches may keep it for this caller only, and must ask again.
    response.headers["Cache-Control"] = "private, no-cache"
    return response.make_conditional(request)
