"""API schemas for review actions, reruns, errors and health (everything but the request itself)."""

from __future__ import annotations

from marshmallow import Schema, fields

from service.store.models import REQUEST_STATUSES

from .catalogue import CatalogueSchema  # noqa: F401 (described beside its generator)
from .records import ResultRecordSchema  # noqa: F401 (the record's blocks)
from .requests import StrictSchema, length, one_of

NOTE = length(1, 5000)


class AssignSchema(StrictSchema):
    """Body of POST /v1/requests/{id}/assign."""

    to = fields.String(
        required=True,
        validate=length(1, 200),
        metadata={"description": "The reviewer who takes the request."},
    )


class CommentSchema(StrictSchema):
    """Body of POST /v1/requests/{id}/comments."""

    text = fields.String(required=True, validate=NOTE)


class ReviewNoteSchema(StrictSchema):
    """Body of POST /v1/requests/{id}/approve and /return: the reviewer's note is required."""

    note = fields.String(required=True, validate=NOTE)


class CancelSchema(StrictSchema):
    """Optional body of POST /v1/requests/{id}/cancel."""

    reason = fields.String(allow_none=True, validate=NOTE)


class RerunCreateSchema(StrictSchema):
    """Optional body of POST /v1/requests/{id}/reruns."""

    note = fields.String(allow_none=True, validate=NOTE)


class ProblemSchema(Schema):
    """An RFC 9457 problem document; ``errors`` maps dotted field paths to messages."""

    class Meta:
        # RFC 9457 lets a problem carry extension members; clients ignore the ones they don't know.
        unknown = "include"

    type = fields.String(required=True)
    title = fields.String(required=True)
    status = fields.Integer(required=True)
    detail = fields.String()
    instance = fields.String()
    errors = fields.Dict(
        keys=fields.String(),
        values=fields.List(fields.String()),
        metadata={"description": "Validation messages keyed by dotted field path."},
    )
    current_status = fields.String(metadata={"description": "The request's status (409 only)."})
    checks = fields.Dict(metadata={"description": "Per-dependency readiness (503 only)."})
    role = fields.String(metadata={"description": "The caller's role (403 only)."})
    allowed_roles = fields.List(
        fields.String(), metadata={"description": "Roles that may make this call (403 only)."}
    )
    allowed_from = fields.List(
        fields.String(validate=one_of(REQUEST_STATUSES)),
        metadata={
            "description": "The statuses the refused transition is allowed from (409 on cancel, "
            "assign, comment, approve or return)."
        },
    )
    limit = fields.String(metadata={"description": "The rate limit that was used up (429 only)."})
    estimate = fields.Integer(
        metadata={"description": "Estimated draws of the refused work (422 or 429, budget)."}
    )
    remaining = fields.Integer(
        metadata={"description": "Draws left of the token's hourly budget (429, budget)."}
    )
    budget = fields.Integer(metadata={"description": "The budget in draws (422 or 429, budget)."})


class HealthSchema(Schema):
    """Body of /healthz and /readyz when all is well."""

    status = fields.String(required=True)
    checks = fields.Dict(keys=fields.String(), values=fields.String())
