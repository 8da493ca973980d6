"""Write a request's audit bundle from the store (a read: nothing is changed or appended)."""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.store import requests as store
from service.store.models import AuditEvent, Request
from service.store.types import utcnow

from . import FORMAT, FORMAT_VERSION, LOCK_FILE
from .check import environment


def _plain(value: Any) -> Any:
    # The JSON the database hands back, dates as ISO text: what the audit hashes were taken of.
    return json.loads(json.dumps(value, default=str))


def _event(event: AuditEvent) -> dict:
    return {
        "id": event.id,
        "request_id": event.request_id,
        "actor": event.actor,
        "action": event.action,
        "detail": event.detail,
        # The exact text the chain hash covers.
        "created_at": event.created_at.isoformat(),
        "prev_sha256": event.prev_sha256,
        "sha256": event.sha256,
    }


def _segment(session: Session, first: int, last: int) -> list[dict]:
    """Every event's links from the request's first event to its last, other requests' included.

    Other events show only their id and hashes (they may concern other requests or tokens), which
    is enough to follow the chain from one of this request's events to the next.
    """
    rows = session.execute(
        select(AuditEvent.id, AuditEvent.prev_sha256, AuditEvent.sha256)
        .where(AuditEvent.id.between(first, last))
        .order_by(AuditEvent.id)
    )
    return [{"id": i, "prev_sha256": prev, "sha256": sha} for i, prev, sha in rows]


def build_bundle(session: Session, row: Request) -> dict:
    """The bundle of a request with a result; raises store.ResultMissing otherwise."""
    result = store.result_for(session, row.id)
    if result is None:
        raise store.ResultMissing(row.id, row.status)
    events = store.history(session, row.id)
    head = session.execute(
        select(AuditEvent.id, AuditEvent.sha256).order_by(AuditEvent.id.desc()).limit(1)
    ).first()
    repro = result.record.get("reproducibility") or {}
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "exported_at": utcnow().isoformat(timespec="seconds"),
        "request": {
            "id": row.id,
            "status": row.status,
            "submitted_at": row.submitted_at.isoformat(),
        },
        "submission": _plain(store.submission_fields(row)),
        "question": row.question,
        "seed": row.seed,
        "seed_scheme": {
            "scheme": repro.get("seed_scheme"),
            "bit_generator": repro.get("bit_generator"),
            "chunk_size": repro.get("chunk_size"),
        },
        "record": result.record,
        "record_sha256": result.record_sha256,
        "environment": {
            "computed_with": result.versions,
            "exported_with": environment(),
            "lock_file": LOCK_FILE,
        },
        "audit": {
            "events": [_event(e) for e in events],
            "chain": _segment(session, events[0].id, events[-1].id) if events else [],
            "head": {"event": head[0], "sha256": head[1]} if head else None,
        },
    }
