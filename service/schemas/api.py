"""API schemas for review actions, reruns, errors and health (everything but the request itself)."""

from __future__ import annotations

from marshmallow import Schema, fields

from .requests import StrictSchema, length

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
    limit = fields.String(metadata={"description": "The rate limit that was used up (429 only)."})


class HealthSchema(Schema):
    """Body of /healthz and /readyz when all is well."""

    status = fields.String(required=True)
    checks = fields.Dict(keys=fields.String(), values=fields.String())


class CatalogueSchema(Schema):
    """GET /v1/catalogue: the cells (outcome × layout), their analyses and fields."""

    class Meta:
        # The catalogue's shape belongs to service.schemas.catalogue; pass it through unchanged.
        unknown = "include"


class ResultRecordSchema(Schema):
    """The engine's result record (see DEVELOPERS.md, "The result record")."""

    record_version = fields.Integer()
    question = fields.Dict()
    sample_size = fields.Dict(allow_none=True)
    power = fields.Dict(allow_none=True)
    effect = fields.Raw(allow_none=True)
    method = fields.Dict()
    # The contract's keys that are null for some designs or methods.
    type_i_error = fields.Dict(allow_none=True)
    search = fields.Dict(allow_none=True)
    events = fields.Dict(allow_none=True)
    reproducibility = fields.Dict()
    cautions = fields.List(fields.String())
    warnings = fields.List(fields.String())
