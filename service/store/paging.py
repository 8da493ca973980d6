"""Keyset pages: a stable order by (creation time, id), resumed after the last row's key."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import Select, and_, or_
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
