"""Data functions for a request's explorations: sensitivity grids and robustness panels (never commit).

An exploration is a job like a request (see ``jobs``, job 'exploration'); this module only
creates and reads the rows. Types are the API's words ('sensitivity_grid', 'robustness_panel');
the row stores the first version's value (``models.EXPLORATION_TYPES``).
"""

from __future__ import annotations

import uuid

from sqlalchemy import select
from sqlalchemy.orm import Session

from service import jsonlog

from .audit import add_with_event
from .models import EXPLORATION_TYPES, Exploration
from .paging import Key, of_request, page_of_request


def create_exploration(
    session: Session, request_id: str, type_: str, params: dict, actor: str
) -> Exploration:
    """Insert a queued exploration of ``request_id`` and its 'exploration_requested' event."""
    if type_ not in EXPLORATION_TYPES:
        raise ValueError(
            f"exploration type must be one of {tuple(EXPLORATION_TYPES)}; got {type_!r}"
        )
    row = Exploration(
        id=uuid.uuid4().hex,
        request_id=request_id,
        stored_kind=EXPLORATION_TYPES[type_],
        params=params,
        trace_id=jsonlog.current().get("request_id"),
        status="queued",
        requested_by=actor,
        attempts=0,
    )
    return add_with_event(
        session,
        row,
        request_id=request_id,
        actor=actor,
        action="exploration_requested",
        detail={"exploration_id": row.id, "type": type_},
    )


def explorations_for(session: Session, request_id: str) -> list[Exploration]:
    """Return the request's explorations, oldest first."""
    return of_request(session, Exploration, Exploration.created_at, request_id)


def explorations_page(
    session: Session, request_id: str, *, after: Key | None, limit: int
) -> tuple[list[Exploration], Key | None]:
    """One page of the request's explorations, oldest first, and the key of the next page."""
    return page_of_request(
        session, Exploration, Exploration.created_at, request_id, after=after, limit=limit
    )


def waiting(session: Session, request_id: str) -> list[str]:
    """Return the ids of the request's explorations stored unpublished, waiting for its result."""
    return list(
        session.scalars(
            select(Exploration.id)
            .where(
                Exploration.request_id == request_id,
                Exploration.status == "queued",
                Exploration.published_at.is_(None),
            )
            .order_by(Exploration.created_at, Exploration.id)
        )
    )


def latest_done(session: Session, request_id: str) -> dict[str, Exploration]:
    """Return the newest finished exploration of each type, keyed by type."""
    done: dict[str, Exploration] = {}
    for row in explorations_for(session, request_id):
        if row.status == "done":
            done[row.type] = row  # oldest first, so the last one written wins
    return done
