"""The one place the desk names a request's follow-up computations, its explorations: sensitivity
grids and robustness panels, asked for through the API's own way in."""

from __future__ import annotations

from sqlalchemy.orm import Session

from service.api.explorations import start_exploration
from service.schemas.requests import ExplorationCreateSchema
from service.store import explorations as store

GRID, PANEL = "sensitivity_grid", "robustness_panel"


def finished(session: Session, request_id: str) -> dict:
    """The request's latest finished grid and panel results by type (what its report shows)."""
    return {kind: row.result for kind, row in store.latest_done(session, request_id).items()}


def ask(request_id: str, kind: str, grid: dict[str, list[float]] | None = None) -> str:
    """Validate the item with the API's schema, then store, charge and publish it as the API
    does (409 for a failed or cancelled request, 422 with the field); return its id."""
    body: dict = {"type": kind}
    if grid is not None:
        body["grid"] = grid
    return start_exploration(request_id, ExplorationCreateSchema().load(body))
