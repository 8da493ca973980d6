"""The one place the desk names a request's follow-up computations: sensitivity grids and
robustness panels (issue 10 renames them explorations; adapt here, nowhere else)."""

from __future__ import annotations

from sqlalchemy.orm import Session

from service.api.analyses import start_analysis
from service.schemas.requests import AnalysisCreateSchema
from service.store import analyses as store

GRID, PANEL = "sensitivity", "robustness"


def finished(session: Session, request_id: str) -> dict:
    """The request's latest finished grid and panel results by kind (what its report shows)."""
    return {kind: row.result for kind, row in store.latest_done(session, request_id).items()}


def ask(request_id: str, kind: str, grid: dict[str, list[float]] | None = None) -> str:
    """Validate the item with the API's schema, then store, charge and publish it as the API
    does (409 for a failed or cancelled request, 422 with the field); return its id."""
    body: dict = {"kind": kind}
    if grid is not None:
        body["grid"] = grid
    return start_analysis(request_id, AnalysisCreateSchema().load(body))
