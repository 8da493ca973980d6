"""API schemas for study requests: the submission body, the stored record and list filters.

The ``question`` member is validated by ``service.schemas.question.load_question``; its errors
come back keyed under ``question.`` (``question.assumptions.sd``), like every other field path.
An exploration (sensitivity grid, robustness panel) has one body shape, ``ExplorationCreateSchema``,
whether it comes in a request's ``explorations`` list or later on its own.
"""

from __future__ import annotations

from typing import Any

from marshmallow import Schema, ValidationError, fields, post_load, validate, validates_schema

from service.schemas.errors import QuestionInvalid
from service.schemas.explorations import price_errors
from service.schemas.paging import cursor_field, limit_field, next_field
from service.schemas.question import load_question
from service.schemas.vocabulary import METHODS
from service.store.models import (
    EXPLORATION_STATUSES,
    EXPLORATION_TYPES,
    REQUEST_STATUSES,
    RERUN_STATUSES,
)

ID_PATTERN = r"^[0-9a-f]{32}$"


class StrictSchema(Schema):
    """Base of the API schemas: unknown fields are refused with the list of allowed ones."""

    def handle_error(self, error: ValidationError, data: Any, *, many: bool, **kwargs) -> None:
        """Name the allowed fields beside every unknown one."""
        if isinstance(error.messages, dict):
            allowed = ", ".join(sorted(f.data_key or name for name, f in self.load_fields.items()))
            for key, messages in error.messages.items():
                if messages == [self.error_messages["unknown"]]:
                    error.messages[key] = [f"unknown field; allowed: {allowed}"]


def one_of(choices) -> validate.OneOf:
    """OneOf whose message echoes the value and lists the choices."""
    return validate.OneOf(choices, error="must be one of: {choices}; got {input!r}")


def in_range(lo: int, hi: int | None = None) -> validate.Range:
    """Range whose message echoes the value."""
    if hi is None:
        return validate.Range(min=lo, error="must be at least {min}; got {input}")
    return validate.Range(min=lo, max=hi, error="must be from {min} to {max}; got {input}")


def length(lo: int, hi: int) -> validate.Length:
    """Length with a readable message."""
    return validate.Length(min=lo, max=hi, error="must be {min} to {max} characters long")


class _AnotherType:
    def __repr__(self) -> str:
        return "a value of another type"


class _EchoArgs(dict):
    def __missing__(self, key: str) -> _AnotherType:
        return _AnotherType()


class Echo(str):
    """A message echoing ``{input!r}`` that also formats when a field's type check gives no input.

    marshmallow formats a field's "invalid" message without ``input`` when the posted value has
    the wrong JSON type (a number for an e-mail); a plain str would raise KeyError there (a 500).
    """

    def format(self, *args, **kwargs) -> str:
        return self.format_map(_EchoArgs(kwargs))


EMAIL_ERRORS = {"invalid": Echo("must be an e-mail address; got {input!r}")}
DATE_ERRORS = {"invalid": Echo("must be an ISO date (YYYY-MM-DD); got {input!r}")}
INT_ERRORS = {"invalid": Echo("must be a whole number; got {input!r}")}


class QuestionField(fields.Dict):
    """A raw question object, validated and normalized by ``load_question``; the OpenAPI
    document points it at the generated Question component (``x-question``)."""

    def __init__(self, **kwargs):
        kwargs["metadata"] = {**kwargs.get("metadata", {}), "x-question": True}
        super().__init__(**kwargs)

    def _deserialize(self, value, attr, data, **kwargs) -> dict:
        raw = super()._deserialize(value, attr, data, **kwargs)

        try:
            return load_question(raw)
        except QuestionInvalid as exc:
            # Nested relative to the question, so each error lands at its own path under the
            # member (question.effect.sd; the question's own at question).
            raise ValidationError(exc.messages) from None


class ProtocolSchema(StrictSchema):
    """The study protocol the question belongs to."""

    id = fields.String(
        required=True,
        validate=validate.Regexp(
            r"^[A-Za-z0-9][A-Za-z0-9._/-]{0,63}$",
            error="must be 1-64 letters, digits or . _ / - (starting with a letter or digit)",
        ),
        metadata={"description": "The protocol's identifier in the institution's register."},
    )
    title = fields.String(required=True, validate=length(1, 300))
    version = fields.String(validate=length(1, 40))
    principal_investigator = fields.String(validate=length(1, 200))


class RequesterSchema(StrictSchema):
    """Who asks: name, e-mail and department."""

    name = fields.String(required=True, validate=length(1, 200))
    email = fields.Email(
        required=True, validate=validate.Length(max=320), error_messages=EMAIL_ERRORS
    )
    department = fields.String(required=True, allow_none=True, validate=length(1, 200))


GRID_DESCRIPTION = (
    "Dotted path of the question -> list of values, e.g. "
    '{"effect.difference": [4, 5, 6], "assumptions.sd": [10, 12], "adjustments.dropout": '
    "[0.1, 0.2]}; at most 3 axes and 400 cells."
)


class GridField(fields.Dict):
    """A sensitivity grid: field path -> list of values (checked against the question later)."""

    def __init__(self, **kwargs):
        super().__init__(
            keys=fields.String(validate=length(1, 100)),
            values=fields.List(fields.Raw(), validate=validate.Length(min=1, max=400)),
            metadata={"description": GRID_DESCRIPTION},
            **kwargs,
        )


class ExplorationCreateSchema(StrictSchema):
    """One exploration of a request: a sensitivity grid or a robustness panel. The same item is
    posted in a request's ``explorations`` list and to POST /v1/requests/{id}/explorations."""

    type = fields.String(
        required=True,
        validate=one_of(tuple(EXPLORATION_TYPES)),
        metadata={"description": "sensitivity_grid or robustness_panel"},
    )
    grid = GridField()
    replicates = fields.Integer(
        validate=in_range(200, 2_000_000),
        error_messages=INT_ERRORS,
        metadata={
            "description": "robustness_panel only: replicates per data model (default: the "
            "request's, or 5,000 for an analytic request)"
        },
    )

    @validates_schema
    def fields_fit_the_type(self, data: dict, **_kwargs) -> None:
        """A sensitivity grid needs a grid; a robustness panel takes none."""
        kind = data.get("type")
        if kind == "sensitivity_grid" and "grid" not in data:
            raise ValidationError("is required for type sensitivity_grid", "grid")
        if kind == "sensitivity_grid" and "replicates" in data:
            raise ValidationError(
                "applies to type robustness_panel only; a grid uses the request's replicates",
                "replicates",
            )
        if kind == "robustness_panel" and "grid" in data:
            raise ValidationError("applies to type sensitivity_grid only", "grid")


class SensitivityGridCreateSchema(StrictSchema):
    """A sensitivity grid: the question re-solved at every combination of the listed values."""

    type = fields.String(required=True, validate=one_of(("sensitivity_grid",)))
    grid = fields.Dict(
        keys=fields.String(validate=length(1, 100)),
        values=fields.List(fields.Float(), validate=validate.Length(min=1, max=400)),
        required=True,
        validate=validate.Length(min=1, max=3),
        metadata={"description": GRID_DESCRIPTION},
    )


class RobustnessPanelCreateSchema(StrictSchema):
    """A robustness panel: the planned test simulated under departures from the planned data."""

    type = fields.String(required=True, validate=one_of(("robustness_panel",)))
    replicates = ExplorationCreateSchema._declared_fields["replicates"]


class SensitivityGridParamsSchema(StrictSchema):
    """The stored parameters of a sensitivity grid: its grid as posted."""

    grid = SensitivityGridCreateSchema._declared_fields["grid"]


class RobustnessPanelParamsSchema(StrictSchema):
    """The stored parameters of a robustness panel: replicates per data model and the seed."""

    replicates = fields.Integer(required=True)
    seed = fields.Integer(
        required=True, metadata={"description": "The simulated request's seed, or one drawn."}
    )


IDEMPOTENCY_DESCRIPTION = (
    "Makes a retried submission safe: the same key with the same body returns the first "
    "request (200) instead of storing another; the same key with another body is refused "
    "(422). Keys are global across tokens: a key used by any token counts, so make it unique "
    "(e.g. a UUID). 1 to 200 printable ASCII characters."
)


def _budget() -> int | None:
    """The per-simulation budget of the running app (None outside one, e.g. in the CLI)."""
    from flask import current_app, has_app_context

    if not has_app_context():
        return None
    return int(current_app.extensions["sizewise"]["config"]["SIMULATION_BUDGET"])


def exploration_errors(question: dict, items: list[dict]) -> dict[str, list[str]]:
    """Field-keyed errors of the explorations asked for with ``question`` (``3.grid.alpha``)."""
    return price_errors(question, items, _budget())


class RequestCreateSchema(StrictSchema):
    """Body of POST /v1/requests."""

    protocol = fields.Nested(ProtocolSchema, required=True)
    requester = fields.Nested(RequesterSchema, required=True)
    deadline = fields.Date(
        allow_none=True,
        error_messages=DATE_ERRORS,
        metadata={"description": "When the answer is needed (ISO date)."},
    )
    notes = fields.String(allow_none=True, validate=validate.Length(max=5000))
    question = QuestionField(
        required=True,
        metadata={"description": "The sample-size question; see GET /v1/catalogue."},
    )
    effect_source = fields.String(
        allow_none=True,
        validate=length(1, 500),
        metadata={
            "description": "Where the assumed effect and SD come from, quoted in the "
            "justification (e.g. 'SD from the 2024 audit of clinic visits')."
        },
    )
    explorations = fields.List(
        fields.Nested(ExplorationCreateSchema),
        validate=validate.Length(max=10, error="must list at most {max} explorations"),
        metadata={
            "description": "Explorations computed once the request is answered (sensitivity "
            "grids, robustness panels), each shaped as for POST /v1/requests/{id}/explorations."
        },
    )

    @validates_schema(skip_on_field_errors=True)
    def explorations_fit_the_question(self, data: dict, **_kwargs) -> None:
        """Check the asked-for explorations against the normalized question (paths, cost)."""
        errors = exploration_errors(data["question"], data.get("explorations") or [])
        if errors:
            raise ValidationError({f"explorations.{k}": v for k, v in errors.items()})

    @post_load(pass_original=True)
    def keep_raw_question(self, data: dict, original: Any, **_kwargs) -> dict:
        """Keep the question as posted beside its normalized form."""
        data["question_raw"] = original["question"]
        return data


class CalculationCreateSchema(StrictSchema):
    """Body of POST /v1/calculations: one analytic question, the same document as a request's
    ``question`` and ``sizewise compute FILE``."""

    question = QuestionField(
        required=True, metadata={"description": "The question; see GET /v1/catalogue."}
    )


PARAMS_DESCRIPTION = (
    "sensitivity_grid: {grid: {path: [values]}}; robustness_panel: {replicates, seed}."
)
RESULT_DESCRIPTION = (
    "null until done. sensitivity_grid: shape, base and cells (each cell's values by dotted "
    "question path, its per_group or power); robustness_panel: per_group, "
    "analyzed_per_group, replicates, seed and one entry per departure with its power and "
    'type_i_error (DEVELOPERS.md, "The result record").'
)


class ExplorationSummarySchema(StrictSchema):
    """A sensitivity grid or robustness panel of a request, without its result."""

    id = fields.String(required=True)
    request_id = fields.String(required=True)
    type = fields.String(required=True, validate=one_of(tuple(EXPLORATION_TYPES)))
    params = fields.Dict(
        keys=fields.String(),
        required=True,
        metadata={"description": PARAMS_DESCRIPTION, "x-component": "ExplorationParams"},
    )
    status = fields.String(required=True, validate=one_of(EXPLORATION_STATUSES))
    requested_by = fields.String(required=True)
    created_at = fields.AwareDateTime(required=True)
    published_at = fields.AwareDateTime(required=True, allow_none=True)
    attempts = fields.Integer(required=True)
    error = fields.String(required=True, allow_none=True)
    finished_at = fields.AwareDateTime(required=True, allow_none=True)


class ExplorationSchema(ExplorationSummarySchema):
    """A sensitivity grid or robustness panel of a request, and its result when done."""

    result = fields.Dict(
        keys=fields.String(),
        required=True,
        allow_none=True,
        metadata={"description": RESULT_DESCRIPTION},
    )


class ExplorationListSchema(StrictSchema):
    """GET /v1/requests/{id}/explorations."""

    items = fields.List(fields.Nested(ExplorationSchema), required=True)
    limit = fields.Integer(required=True)
    next = next_field(required=True)


class ReportLinkSchema(StrictSchema):
    """A signed link that opens a request's report pages in a browser, without a token."""

    url = fields.Url(
        required=True,
        metadata={
            "description": "Absolute URL of the report page with the signed link as its `link` "
            "query parameter; the same `link` value opens curve.svg and curve.png."
        },
    )
    expires_at = fields.AwareDateTime(required=True)


class AuditEventSchema(StrictSchema):
    """One entry of a request's history."""

    id = fields.Integer(required=True)
    actor = fields.String(required=True)
    action = fields.String(required=True)
    detail = fields.Dict(keys=fields.String(), required=True)
    created_at = fields.AwareDateTime(required=True)
    sha256 = fields.String(required=True)


class RerunLatestSchema(StrictSchema):
    """The latest rerun of a request, in brief."""

    id = fields.String(required=True)
    status = fields.String(required=True, validate=one_of(RERUN_STATUSES))
    identical = fields.Boolean(required=True, allow_none=True)


class RerunItemSchema(RerunLatestSchema):
    """A rerun without its record (the items of GET /v1/requests/{id}/reruns)."""

    request_id = fields.String(required=True)
    requested_by = fields.String(required=True)
    requested_at = fields.AwareDateTime(required=True)
    published_at = fields.AwareDateTime(required=True, allow_none=True)
    attempts = fields.Integer(required=True)
    differences = fields.List(fields.String(), required=True, allow_none=True)
    env_original = fields.Dict(keys=fields.String(), required=True)
    env_rerun = fields.Dict(keys=fields.String(), required=True, allow_none=True)
    record_sha256 = fields.String(required=True, allow_none=True)
    finished_at = fields.AwareDateTime(required=True, allow_none=True)
    error = fields.String(required=True, allow_none=True)


class RerunSchema(RerunItemSchema):
    """A rerun: the stored question recomputed and compared with the original record."""

    record = fields.Dict(
        required=True,
        allow_none=True,
        metadata={
            "description": "The recomputed record; null until done.",
            "x-component": "ResultRecord",
        },
    )


class RerunSummarySchema(StrictSchema):
    """Counts of a request's reruns and the latest one."""

    total = fields.Integer(required=True)
    identical = fields.Integer(required=True)
    different = fields.Integer(required=True)
    latest = fields.Nested(RerunLatestSchema, required=True, allow_none=True)


class RequestSummarySchema(StrictSchema):
    """A stored request as listed: everything but its result, history, reruns and explorations."""

    id = fields.String(required=True)
    status = fields.String(required=True, validate=one_of(REQUEST_STATUSES))
    progress = fields.Float(required=True, metadata={"description": "0 to 1."})
    cancel_requested = fields.Boolean(required=True)
    assigned_to = fields.String(required=True, allow_none=True)
    protocol = fields.Nested(ProtocolSchema, required=True)
    requester = fields.Nested(RequesterSchema, required=True)
    deadline = fields.Date(required=True, allow_none=True)
    notes = fields.String(required=True, allow_none=True)
    outcome = fields.String(required=True)
    layout = fields.String(required=True)
    method = fields.String(required=True, validate=one_of(METHODS))
    seed = fields.Integer(required=True, allow_none=True)
    question = fields.Dict(
        required=True,
        metadata={"description": "Normalized question, seed filled in.", "x-question": True},
    )
    submitted_by = fields.String(required=True)
    submitted_at = fields.AwareDateTime(required=True)
    updated_at = fields.AwareDateTime(required=True)
    published_at = fields.AwareDateTime(required=True, allow_none=True)
    attempts = fields.Integer(required=True)
    error = fields.String(required=True, allow_none=True)
    effect_source = fields.String(required=True, allow_none=True)
    links = fields.Nested(
        "RequestLinksSchema",
        required=True,
        metadata={"description": "Absolute URLs a client can follow."},
    )


class RequestLinksSchema(StrictSchema):
    """Absolute URLs of what a client can follow from a request."""

    self = fields.Url(required=True)
    report = fields.Url(required=True)
    reruns = fields.Url(required=True)
    explorations = fields.Url(required=True)
    deliveries = fields.Url(required=True)


class RequestSchema(RequestSummarySchema):
    """A stored request as the API returns it: the summary, its result, history and reruns."""

    question_submitted = fields.Dict(
        required=True, metadata={"description": "The question as posted.", "x-question": True}
    )
    # Sent unchanged (a Dict, not Nested: dumping through the record's schema would drop the
    # members it does not declare); the document shows it as the ResultRecord component.
    result = fields.Dict(
        required=True,
        allow_none=True,
        metadata={
            "description": "The engine's result record, unchanged; null until computed.",
            "x-component": "ResultRecord",
        },
    )
    history = fields.List(fields.Nested(AuditEventSchema), required=True)
    reruns = fields.Nested(RerunSummarySchema, required=True)
    explorations = fields.List(fields.Nested(ExplorationSummarySchema), required=True)


class RequestPageSchema(StrictSchema):
    """One page of GET /v1/requests."""

    items = fields.List(fields.Nested(RequestSummarySchema), required=True)
    limit = fields.Integer(required=True)
    next = next_field(required=True)
    total = fields.Integer(
        required=True, metadata={"description": "Requests matching the filters."}
    )


class RerunListSchema(StrictSchema):
    """GET /v1/requests/{id}/reruns."""

    items = fields.List(fields.Nested(RerunItemSchema), required=True)
    limit = fields.Integer(required=True)
    next = next_field(required=True)


def _cell_word(which: str, value: str) -> None:
    """Refuse an outcome or layout no registered cell has, listing those that exist."""
    from service.schemas.vocabulary import layouts, outcomes

    words = outcomes() if which == "outcome" else layouts()
    if value not in words:
        raise ValidationError(f"must be one of: {', '.join(words)}; got {value!r}")


class RequestQueryArgsSchema(StrictSchema):
    """Query parameters of GET /v1/requests."""

    status = fields.String(validate=one_of(REQUEST_STATUSES))
    protocol_id = fields.String(validate=length(1, 64))
    requester = fields.Email(
        error_messages=EMAIL_ERRORS, metadata={"description": "The requester's e-mail address."}
    )
    outcome = fields.String(
        validate=lambda v: _cell_word("outcome", v),
        metadata={"description": "Only requests on this outcome, e.g. continuous."},
    )
    layout = fields.String(
        validate=lambda v: _cell_word("layout", v),
        metadata={"description": "Only requests with this layout, e.g. two_groups."},
    )
    submitted_from = fields.Date(
        error_messages=DATE_ERRORS,
        metadata={"description": "First UTC day, inclusive; not after submitted_to."},
    )
    submitted_to = fields.Date(
        error_messages=DATE_ERRORS,
        metadata={
            "description": "Last UTC day, inclusive; must not be before submitted_from (422 "
            "naming submitted_to otherwise)."
        },
    )
    limit = limit_field()
    cursor = cursor_field()

    @validates_schema
    def dates_in_order(self, data: dict, **_kwargs) -> None:
        """Refuse a date range that ends before it starts."""
        start, end = data.get("submitted_from"), data.get("submitted_to")
        if start and end and end < start:
            raise ValidationError(
                f"must not be before submitted_from ({start.isoformat()}); got {end.isoformat()}",
                "submitted_to",
            )
