"""The desk's queue: visible requests filtered, sorted by needed-by date, counted and paged."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.store.models import REQUEST_STATUSES, Request

from . import labels

PER_PAGE = 25
UNASSIGNED = "-"
# Still waiting on the core: past its needed-by date, such a request is overdue.
OPEN_STATUSES = ("received", "queued", "running", "computed")
SORTS = {
    "needed_by": "Needed by, soonest first",
    "-needed_by": "Needed by, latest first",
    "submitted": "Newest first",
}


@dataclass
class Filters:
    """What the queue form asked for; ``errors`` names each value it could not use."""

    status: str = ""
    assignee: str = ""
    mine: bool = False
    overdue: bool = False
    cell: str = ""
    sort: str = "needed_by"
    page: int = 1
    errors: dict[str, str] = field(default_factory=dict)

    def query(self, **change) -> dict[str, str]:
        """The query string of these filters with ``change`` applied (empty values left out)."""
        values = {
            "status": self.status,
            "assignee": self.assignee,
            "mine": "1" if self.mine else "",
            "overdue": "1" if self.overdue else "",
            "cell": self.cell,
            "sort": self.sort if self.sort != "needed_by" else "",
            "page": str(self.page) if self.page > 1 else "",
        }
        values.update({k: str(v) for k, v in change.items()})
        return {k: v for k, v in values.items() if v and v != "0"}


def parse(args) -> Filters:
    """Read the queue's query string; an unusable value is dropped and named in ``errors``."""
    f = Filters()
    f.status = args.get("status", "").strip()
    if f.status and f.status not in REQUEST_STATUSES:
        f.errors["status"] = f"status must be one of {', '.join(REQUEST_STATUSES)}"
        f.status = ""
    f.assignee = args.get("assignee", "").strip()[:200]
    f.mine = args.get("mine") == "1"
    f.overdue = args.get("overdue") == "1"
    f.cell = args.get("cell", "").strip()
    if f.cell and f.cell not in labels.cells():
        f.errors["cell"] = f"unknown design {f.cell!r}"
        f.cell = ""
    f.sort = args.get("sort", "needed_by")
    if f.sort not in SORTS:
        f.errors["sort"] = f"sort must be one of {', '.join(SORTS)}"
        f.sort = "needed_by"
    page = args.get("page", "1")
    f.page = int(page) if page.isascii() and page.isdigit() and 0 < int(page) <= 100_000 else 1
    if str(f.page) != page:
        f.errors["page"] = "page must be a whole number from 1"
    return f


@dataclass
class Queue:
    """One page of the queue and what the filters found."""

    rows: list[Request]
    total: int
    counts: dict[str, int]
    assignees: list[str]
    page: int
    pages: int


def _conditions(f: Filters, me: str, submitted_by: str | None, today: date) -> list:
    conditions = []
    if submitted_by is not None:
        conditions.append(Request.submitted_by == submitted_by)
    if f.assignee == UNASSIGNED:
        conditions.append(Request.assigned_to.is_(None))
    elif f.assignee:
        conditions.append(Request.assigned_to == f.assignee)
    if f.mine:
        conditions.append(Request.assigned_to == me)
    if f.overdue:
        conditions.append(Request.deadline < today)
        conditions.append(Request.status.in_(OPEN_STATUSES))
    if f.cell:
        conditions.append(labels.where_cell(f.cell))
    return conditions


def _order(sort: str) -> list:
    if sort == "submitted":
        return [Request.submitted_at.desc(), Request.id]
    # Requests with no needed-by date come last either way.
    deadline = Request.deadline.desc() if sort == "-needed_by" else Request.deadline.asc()
    return [Request.deadline.is_(None), deadline, Request.submitted_at, Request.id]


def load(session: Session, f: Filters, *, me: str, submitted_by: str | None, today: date) -> Queue:
    """The page of requests ``f`` selects among those visible (``submitted_by`` for intake)."""
    base = _conditions(f, me, submitted_by, today)
    # Counts per status under every other filter, so each count says what its status link shows.
    counts = dict(
        session.execute(
            select(Request.status, func.count()).where(*base).group_by(Request.status)
        ).all()
    )
    where = [*base, Request.status == f.status] if f.status else base
    total = session.scalar(select(func.count()).select_from(Request).where(*where)) or 0
    pages = max(1, -(-total // PER_PAGE))
    page = min(f.page, pages)
    rows = session.scalars(
        select(Request)
        .where(*where)
        .order_by(*_order(f.sort))
        .offset((page - 1) * PER_PAGE)
        .limit(PER_PAGE)
    ).all()
    visible = [Request.submitted_by == submitted_by] if submitted_by is not None else []
    assignees = session.scalars(
        select(Request.assigned_to)
        .where(*visible, Request.assigned_to.is_not(None))
        .distinct()
        .order_by(Request.assigned_to)
    ).all()
    return Queue(list(rows), total, counts, list(assignees), page, pages)


def is_overdue(deadline: date | None, status: str, today: date) -> bool:
    """Past its needed-by date and still waiting on the core (the overdue filter's rule)."""
    return deadline is not None and deadline < today and status in OPEN_STATUSES
