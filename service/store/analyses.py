"""Data functions for a request's analyses: sensitivity grids and robustness panels (never commit).

An analysis is a job like a request (see ``jobs``, kind 'analysis'); this module only creates
and reads the rows.
"""

from __future__ import annotations

import uuid

from sqlalchemy import select
from sqlalchemy.orm import Session

from .audit import add_with_event
from .models import ANALYSIS_KINDS, Analysis
from .paging import Key, keyset_page


def create_analysis(
    session: Session, request_id: str, kind: str, params: dict, actor: str
) -> Analysis:
    """Insert a queued analysis of ``request_id`` and its 'analysis_requested' audit event."""
    if kind not in ANALYSIS_KINDS:
        raise ValueError(f"analysis kind must be one of {ANALYSIS_KINDS}; got {kind!r}")
    row = Analysis(
        id=uuid.uuid4().hex,
        request_id=request_id,
        kind=kind,
        params=params,
        status="queued",
        requested_by=actor,
        attempts=0,
    )
    return add_with_event(
        session,
        row,
        request_id=request_id,
        actor=actor,
        action="analysis_requested",
        detail={"analysis_id": row.id, "kind": kind},
    )


def analyses_for(session: Session, request_id: str) -> list[Analysis]:
    """Return the request's analyses, oldest first."""
    return list(
        session.scalars(
            select(Analysis)
            .where(Analysis.request_id == request_id)
            .order_by(Analysis.created_at, Analysis.id)
        )
    )


def analyses_page(
    session: Session, request_id: str, *, after: Key | None, limit: int
) -> tuple[list[Analysis], Key | None]:
    """One page of the request's analyses, oldest first, and the key of the next page."""
    return keyset_page(
        session,
        select(Analysis).where(Analysis.request_id == request_id),
        Analysis.created_at,
        Analysis.id,
        after=after,
        limit=limit,
    )


def waiting(session: Session, request_id: str) -> list[str]:
    """Return the ids of the request's analyses stored unpublished, waiting for its result."""
    return list(
        session.scalars(
            select(Analysis.id)
            .where(
                Analysis.request_id == request_id,
                Analysis.status == "queued",
                Analysis.published_at.is_(None),
            )
            .order_by(Analysis.created_at, Analysis.id)
        )
    )


def latest_done(session: Session, request_id: str) -> dict[str, Analysis]:
    """Return the newest finished analysis of each kind, keyed by kind."""
    done: dict[str, Analysis] = {}
    for row in analyses_for(session, request_id):
        if row.status == "done":
            done[row.kind] = row  # oldest first, so the last one written wins
    return done
