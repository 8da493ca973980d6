"""The audit bundle of a request: one JSON file an auditor can verify without the service."""

from __future__ import annotations

from flask import Blueprint, jsonify
from marshmallow import Schema, fields

from service.bundle.export import build_bundle
from service.store import requests as store
from service.store.db import session_scope

from .context import sessions
from .docs import operation
from .errors import Conflict
from .io import reject_query
from .views import load_request

bp = Blueprint("bundles", __name__, url_prefix="/v1")


class AuditBundleSchema(Schema):
    """GET /v1/requests/{id}/bundle (README, "Audit bundles"; checked by ``sizewise verify``)."""

    class Meta:
        # The question and record inside are the engine's JSON, passed through unchanged.
        unknown = "include"

    format = fields.String(required=True)
    format_version = fields.Integer(required=True)
    exported_at = fields.String(required=True)
    request = fields.Dict(required=True)
    submission = fields.Dict(required=True, metadata={"description": "The request as submitted."})
    question = fields.Dict(
        required=True, metadata={"description": "The normalized question.", "x-question": True}
    )
    seed = fields.Integer(allow_none=True)
    seed_scheme = fields.Dict(required=True)
    record = fields.Dict(
        required=True,
        metadata={"description": "The stored result record.", "x-component": "ResultRecord"},
    )
    record_sha256 = fields.String(required=True)
    environment = fields.Dict(required=True)
    audit = fields.Dict(
        required=True,
        metadata={
            "description": "The request's events, the chain segment from its first event to its "
            "last (other events as id and hashes only) and the chain's head when exported."
        },
    )


@bp.get("/requests/<request_id>/bundle")
@operation(
    "The request's audit bundle: submission, question, seed, record, versions and audit events",
    tag="reruns",
    response=AuditBundleSchema,
    description=(
        "One self-contained JSON file; `sizewise verify BUNDLE` recomputes the record and checks "
        "every hash with no server and no database. 409 while the request has no result."
    ),
    errors=(404, 409, 422, 500, 503),
    headers={"Content-Disposition": "attachment; the file name"},
)
def request_bundle(request_id: str):
    """Return the bundle of a computed request."""
    reject_query()
    with session_scope(sessions()) as session:
        row = load_request(session, request_id)
        try:
            bundle = build_bundle(session, row)
        except store.ResultMissing as exc:
            raise Conflict(str(exc), current_status=exc.status) from None
    response = jsonify(bundle)
    response.headers["Content-Disposition"] = (
        f'attachment; filename="sizewise-bundle-{request_id}.json"'
    )
    return response
