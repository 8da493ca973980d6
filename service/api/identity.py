"""Who is acting: the one place the caller's identity is read (token auth replaces it later)."""

from __future__ import annotations

from flask import request

from .errors import ValidationFailed

ACTOR_HEADER = "X-Sizewise-Actor"


def current_actor() -> str:
    """Return the caller's name from the X-Sizewise-Actor header, or 'anonymous'."""
    value = request.headers.get(ACTOR_HEADER)
    if value is None or not value.strip():
        return "anonymous"
    value = value.strip()
    # Bounded and printable: the actor is stored in every audit event.
    if len(value) > 200 or not value.isprintable():
        raise ValidationFailed(
            f"header {ACTOR_HEADER} must be 1-200 printable characters; got {len(value)} characters",
            errors={f"headers.{ACTOR_HEADER}": ["must be 1-200 printable characters"]},
        )
    return value
