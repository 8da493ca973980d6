"""Pages people read: a request's report, its power curve, and the biostat core's request list."""

from __future__ import annotations

from flask import Blueprint, Response

from service.reports.plots import curve_points, power_curve_png, power_curve_svg
from service.reports.render import render_report, render_staff_list
from service.schemas.requests import RequestQueryArgsSchema
from service.store import requests as store
from service.store.db import session_scope
from service.store.models import Request

from . import render
from .context import sessions
from .docs import operation
from .errors import Conflict, NotFound
from .identity import visible_submitter
from .io import load_query, reject_query

bp = Blueprint("reports", __name__, url_prefix="/v1")

PAGE_ERRORS = (404, 409, 422, 500, 503)


def _detail_with_result(request_id: str) -> dict:
    """The request's detail; 409 while it has no result record yet."""
    with session_scope(sessions()) as session:
        row = session.get(Request, request_id)
        if row is None:
            raise NotFound(f"no request with id '{request_id}'")
        detail = render.request_detail(session, row)
    if detail["result"] is None:
        raise Conflict(
            f"request '{request_id}' has no result yet (status '{detail['status']}'); "
            "the report exists once it is computed"
        )
    return detail


@bp.get("/requests/<request_id>/report")
@operation(
    "The request's report page (HTML)", tag="reports", media_type="text/html", errors=PAGE_ERRORS
)
def request_report(request_id: str):
    """Render the protocol-ready report: answer, steps, justification, curve, cautions."""
    reject_query()
    detail = _detail_with_result(request_id)
    record = detail["result"]
    html = render_report(detail, record, curve_svg=power_curve_svg(curve_points(record)))
    return Response(html, mimetype="text/html")


@bp.get("/requests/<request_id>/curve.svg")
@operation(
    "The power curve around the answer (SVG)",
    tag="reports",
    media_type="image/svg+xml",
    errors=PAGE_ERRORS,
)
def curve_svg(request_id: str):
    """Power against n per arm around the answer, as SVG."""
    reject_query()
    record = _detail_with_result(request_id)["result"]
    return Response(power_curve_svg(curve_points(record)), mimetype="image/svg+xml")


@bp.get("/requests/<request_id>/curve.png")
@operation(
    "The power curve around the answer (PNG)",
    tag="reports",
    media_type="image/png",
    errors=PAGE_ERRORS,
)
def curve_png(request_id: str):
    """Power against n per arm around the answer, as PNG for documents."""
    reject_query()
    record = _detail_with_result(request_id)["result"]
    return Response(power_curve_png(curve_points(record)), mimetype="image/png")


@bp.get("/staff/requests")
@operation(
    "Requests and their status for the biostatistics core (HTML)",
    tag="reports",
    media_type="text/html",
    query=RequestQueryArgsSchema,
    errors=(422, 500, 503),
)
def staff_requests():
    """Render one page of requests with their status, newest first."""
    args = load_query(RequestQueryArgsSchema())
    page, per_page = args.pop("page"), args.pop("per_page")
    with session_scope(sessions()) as session:
        result = store.list_requests(
            session, page=page, per_page=per_page, submitted_by=visible_submitter(), **args
        )
        items = render.request_page(result, page, per_page)["items"]
    return Response(render_staff_list(items), mimetype="text/html")
