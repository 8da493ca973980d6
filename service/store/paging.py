"""Keyset pages: a stable order by (creation time, id), resumed after the last row's key.

A request's own rows (reruns, explorations, webhook messages) are listed oldest first, whole or
a page at a time, by :func:`of_request` and :func:`page_of_request`.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import Select, and_, or_, select
from sqlalchemy.orm import Session

Key = tuple[datetime, str]


def keyset_page(
    session: Session,
    stmt: Select,
    created: Any,
    ident: Any,
    *,
    after: Key | None,
    limit: int,
    newest_first: bool = False,
) -> tuple[list, Key | None]:
    """Return up to ``limit`` rows after ``after`` and the key to resume from (None at the end).

    Rows inserted while a client pages never shift what it has not seen yet, unlike an offset.
    """
    if after is not None:
        at, last = after
        if newest_first:
            stmt = stmt.where(or_(created < at, and_(created == at, ident < last)))
        else:
            stmt = stmt.where(or_(created > at, and_(created == at, ident > last)))
    order = (created.desc(), ident.desc()) if newest_first else (created.asc(), ident.asc())
    rows = list(session.scalars(stmt.order_by(*order).limit(limit + 1)))
    if len(rows) <= limit:
        return rows, None
    rows = rows[:limit]
    last_row = rows[-1]
    return rows, (getattr(last_row, created.key), getattr(last_row, ident.key))


def of_request(session: Session, model: Any, created: Any, request_id: str) -> list:
    """Every row of ``model`` that belongs to the request, oldest first (``created``, then id)."""
    stmt = select(model).where(model.request_id == request_id).order_by(created, model.id)
    return list(session.scalars(stmt))


def page_of_request(
    session: Session, model: Any, created: Any, request_id: str, *, after: Key | None, limit: int
) -> tuple[list, Key | None]:
    """One page of the request's rows of ``model``, oldest first, and the key of the next page."""
    stmt = select(model).where(model.request_id == request_id)
    return keyset_page(session, stmt, created, model.id, after=after, limit=limit)
