"""Pages people read: a request's report, its power curve, and the biostat core's request list.

The report and the curve also open with a signed ``?link=`` instead of a bearer token (see
``auth.LINK_ENDPOINTS``), so a browser can show them; ``POST .../report-links`` issues one.
"""

from __future__ import annotations

from flask import Blueprint, Response, jsonify, request
from marshmallow import Schema, fields

from service.reports.plots import curve_points, power_curve_png, power_curve_svg, sensitivity_svg
from service.reports.render import render_report, render_staff_list
from service.schemas.requests import ReportLinkSchema, RequestQueryArgsSchema
from service.store import explorations as exploration_store
from service.store.audit import append_event
from service.store.db import session_scope

from . import explorations, render
from .auth import LINK_PARAM, LINKS_REVOKED, link_generation, report_link
from .context import sessions
from .docs import operation
from .errors import Conflict, ValidationFailed
from .identity import current_actor
from .io import reject_query
from .views import load_request, visible_request_page

bp = Blueprint("reports", __name__, url_prefix="/v1")
bp.register_blueprint(explorations.bp)

PAGE_ERRORS = (404, 409, 422, 500, 503)
_LINK_SCHEMA = ReportLinkSchema()


def _page_query() -> None:
    """Refuse every query parameter but the report link."""
    extra = [k for k in request.args if k != LINK_PARAM]
    if extra:
        raise ValidationFailed(
            f"this page takes no query parameters but '{LINK_PARAM}'",
            errors={f"query.{k}": ["unknown parameter"] for k in extra},
        )


def _detail_with_result(request_id: str) -> tuple[dict, dict]:
    """The request's detail and its latest finished explorations; 409 while it has no result yet."""
    with session_scope(sessions()) as session:
        detail = render.request_detail(session, load_request(session, request_id))
        done = {k: e.result for k, e in exploration_store.latest_done(session, request_id).items()}
    if detail["result"] is None:
        raise Conflict(
            f"request '{request_id}' has no result yet (status '{detail['status']}'); "
            "the report exists once it is computed"
        )
    return detail, done


def _curve(request_id: str, draw, mimetype: str) -> Response:
    """The power curve of the request's result, drawn by ``draw`` (SVG or PNG)."""
    _page_query()
    record = _detail_with_result(request_id)[0]["result"]
    return Response(draw(curve_points(record)), mimetype=mimetype)


@bp.get("/requests/<request_id>/report")
@operation(
    "The request's report page (HTML)", tag="reports", media_type="text/html", errors=PAGE_ERRORS
)
def request_report(request_id: str):
    """Render the protocol-ready report: answer, steps, justification, curve, explorations, cautions."""
    _page_query()
    detail, done = _detail_with_result(request_id)
    return Response(report_html(detail, done), mimetype="text/html")


def report_html(detail: dict, done: dict) -> str:
    """The report page of a request with a result and its latest finished explorations.

    The API's report and the desk's request page both show it.
    """
    record = detail["result"]
    grid = done.get("sensitivity_grid")
    pending = [e for e in detail["explorations"] if e["status"] in ("queued", "running")]
    return render_report(
        detail,
        record,
        curve_svg=power_curve_svg(curve_points(record)),
        sensitivity=grid,
        sensitivity_svg=sensitivity_svg(grid, record["question"]) if grid else None,
        robustness=done.get("robustness_panel"),
        pending=pending,
    )


@bp.get("/requests/<request_id>/curve.svg")
@operation(
    "The power curve around the answer (SVG)",
    tag="reports",
    media_type="image/svg+xml",
    errors=PAGE_ERRORS,
)
def curve_svg(request_id: str):
    """Power against the enrolled size around the answer, as SVG with its title and assumptions.

    A design whose stage rules fix its size draws its exact power against the true rate instead.
    """
    return _curve(request_id, power_curve_svg, "image/svg+xml")


@bp.get("/requests/<request_id>/curve.png")
@operation(
    "The power curve around the answer (PNG)",
    tag="reports",
    media_type="image/png",
    errors=PAGE_ERRORS,
)
def curve_png(request_id: str):
    """Power against the enrolled size around the answer, as PNG that stands alone in a document.

    A design whose stage rules fix its size draws its exact power against the true rate instead.
    """
    return _curve(request_id, power_curve_png, "image/png")


@bp.post("/requests/<request_id>/report-links")
@operation(
    "A signed link that opens the report in a browser for 24 hours",
    tag="reports",
    status=201,
    response=ReportLinkSchema,
    description=(
        "The link (an HMAC-SHA256 over the request id and the expiry) opens only this "
        "request's report, curve.svg and curve.png, with no Authorization header."
    ),
    errors=(404, 422, 500, 503),
)
def create_report_link(request_id: str):
    """Issue a signed report link for a request the caller may read (recorded, never its secret)."""
    reject_query()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        generation = link_generation(session, request_id)
        link = report_link(request_id, generation)
        append_event(
            session,
            request_id=request_id,
            actor=current_actor(),
            action="report_link_issued",
            detail={"expires_at": link["expires_at"].isoformat(), "generation": generation},
        )
    return jsonify(_LINK_SCHEMA.dump(link)), 201


class ReportLinksRevokedSchema(Schema):
    """The answer to a revocation: from when and how many times the links were revoked."""

    request_id = fields.String(required=True)
    revoked_at = fields.AwareDateTime(required=True)
    revocations = fields.Integer(
        required=True,
        metadata={"description": "How many times this request's links have been revoked."},
    )


@bp.post("/requests/<request_id>/report-links/revoke")
@operation(
    "Revoke every report link of the request issued so far",
    tag="reports",
    response=ReportLinksRevokedSchema,
    description=(
        "Every link issued before this call stops working at once (401, 'revoked'), even "
        "before its 24 hours are up; links issued afterwards work. Recorded in the audit trail."
    ),
    errors=(401, 403, 404, 422, 429, 500, 503),
)
def revoke_report_links(request_id: str):
    """Revoke the request's report links: an audited event that changes every valid signature."""
    reject_query()
    with session_scope(sessions()) as session:
        load_request(session, request_id)
        revocations = link_generation(session, request_id) + 1
        event = append_event(
            session,
            request_id=request_id,
            actor=current_actor(),
            action=LINKS_REVOKED,
            detail={"generation": revocations},
        )
        revoked_at = event.created_at
    return jsonify(
        ReportLinksRevokedSchema().dump(
            {"request_id": request_id, "revoked_at": revoked_at, "revocations": revocations}
        )
    )


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
    items = visible_request_page()["items"]
    return Response(render_staff_list(items), mimetype="text/html")
