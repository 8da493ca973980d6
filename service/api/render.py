"""Turn store rows into the dicts the response schemas dump."""

from __future__ import annotations

from typing import Any

from flask import has_request_context
from sqlalchemy.orm import Session

from service.schemas.requests import (
    AuditEventSchema,
    RequestSchema,
    RequestSummarySchema,
    RerunSchema,
)
from service.store import explorations as exploration_store
from service.store import requests as store
from service.store.models import Request, Rerun

from .links import link
from .pagination import page_body

_DETAIL = RequestSchema()
_SUMMARY = RequestSummarySchema()
_RERUN = RerunSchema()
_EVENT = AuditEventSchema()


def request_links(request_id: str) -> dict[str, str]:
    """Absolute URLs of what a client can follow from a request."""
    return {
        "self": link("requests.get_request", request_id=request_id),
        "report": link("reports.request_report", request_id=request_id),
        "reruns": link("requests.list_reruns", request_id=request_id),
        "explorations": link("reports.explorations.list_explorations", request_id=request_id),
        "deliveries": link("webhooks.list_deliveries", request_id=request_id),
    }


def _base(row: Request) -> dict[str, Any]:
    data = _fields(row)
    # Links need the caller's host (or the public URL); the command line renders without them.
    if has_request_context():
        data["links"] = request_links(row.id)
    return data


def _fields(row: Request) -> dict[str, Any]:
    return {
        "id": row.id,
        "status": row.status,
        "progress": row.progress,
        "cancel_requested": row.cancel_requested,
        "assigned_to": row.assigned_to,
        "protocol": row.protocol,
        "requester": row.requester,
        "deadline": row.deadline,
        "notes": row.notes,
        "outcome": (row.question or {}).get("outcome"),
        "layout": (row.question or {}).get("layout"),
        "method": row.method,
        "seed": row.seed,
        "question": row.question,
        "question_submitted": row.question_raw,
        "submitted_by": row.submitted_by,
        "submitted_at": row.submitted_at,
        "updated_at": row.updated_at,
        "published_at": row.published_at,
        "attempts": row.attempts,
        "error": row.error,
        "effect_source": row.effect_source,
    }


def request_detail(session: Session, row: Request, present: store.Present | None = None) -> dict:
    """Return the full request: result record, history and a reruns summary.

    ``present`` says which of its result, reruns and explorations exist when the caller read it
    with the row (``store.request_and_present``); else it is read here.
    """
    if present is None:
        present = store.present(session, row.id)
    result = store.result_for(session, row.id) if present.result else None
    reruns = store.reruns_for(session, row.id) if present.reruns else []
    data = _base(row)
    data["result"] = result.record if result is not None else None
    data["history"] = store.history(session, row.id)
    data["reruns"] = {
        "total": len(reruns),
        "identical": sum(1 for r in reruns if r.identical is True),
        "different": sum(1 for r in reruns if r.identical is False),
        "latest": reruns[-1] if reruns else None,
    }
    data["explorations"] = (
        exploration_store.explorations_for(session, row.id) if present.explorations else []
    )
    return _DETAIL.dump(data)


def request_page(page: store.Page, limit: int) -> dict:
    """Return one listing page with its ``next`` link."""
    items = [_SUMMARY.dump(_base(row)) for row in page.items]
    return page_body(items, limit, page.next_key, total=page.total)


def rerun(row: Rerun) -> dict:
    """Return one rerun."""
    return _RERUN.dump(row)


def event(row) -> dict:
    """Return one audit event."""
    return _EVENT.dump(row)
