"""The audit chain's hashes as pure functions (stdlib only).

The store seals events with them and ``sizewise verify`` checks an exported bundle with them,
with no database: one definition, so the two can never disagree.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any


def canonical(value: Any) -> str:
    """Sorted keys, no spaces, UTF-8 kept: the form every audit hash is taken of."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def content_hash(value: Any) -> str:
    """SHA-256 of the canonical JSON of a stored value, as the event that recorded it holds it.

    ``default=str`` turns dates into their ISO form, the same before and after a database trip.
    """
    # One JSON round trip first, as the database makes: integer keys become strings, tuples lists.
    plain = json.loads(json.dumps(value, default=str))
    return hashlib.sha256(canonical(plain).encode("utf-8")).hexdigest()


def chain_hash(
    prev_sha256: str | None,
    event_id: int,
    request_id: str | None,
    actor: str,
    action: str,
    detail: Any,
    created_at_iso: str,
) -> str:
    """The chain hash of one event from its fields and its predecessor's hash."""
    payload = canonical(
        [prev_sha256, event_id, request_id, actor, action, canonical(detail), created_at_iso]
    )
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()
