"""The result record's blocks as response schemas, for the OpenAPI document (DEVELOPERS.md,
"The result record").

The record is the engine's JSON, sent unchanged; these schemas only describe it. A member marked
``required`` is in every record (its value may be null where ``allow_none``); each block is open
(``unknown = INCLUDE``): a design may add notes of its own, and a client ignores what it does
not know.
"""

from __future__ import annotations

from marshmallow import INCLUDE, Schema, fields

from .requests import one_of
from .vocabulary import METHODS

VERDICTS = ("holds", "conservative", "exceeds")


class OpenSchema(Schema):
    """A block of the record: its documented members, and any a design adds."""

    class Meta:
        unknown = INCLUDE


def _numbers(**kwargs) -> fields.List:
    return fields.List(fields.Float(), **kwargs)


def _whole(**kwargs) -> fields.List:
    return fields.List(fields.Integer(), **kwargs)


class SizeStepSchema(OpenSchema):
    """One step from the raw solution to the enrolled numbers (rounding, dropout, clustering …)."""

    step = fields.String(required=True, metadata={"description": "What this step did."})
    per_group_raw = _numbers(metadata={"description": "Per group before this step's rounding."})
    per_group = _whole(metadata={"description": "Per group after this step."})


class SampleSizeResultSchema(OpenSchema):
    """The enrolled numbers and how they were reached."""

    per_group = _whole(
        required=True, metadata={"description": "Enrolled subjects per group, control first."}
    )
    total = fields.Integer(required=True)
    steps = fields.List(fields.Nested(SizeStepSchema), required=True)
    analyzed_per_group = _numbers(
        metadata={"description": "find = power or effect: subjects analyzed after dropout."}
    )


class PowerResultSchema(OpenSchema):
    """The power at the answer; Monte Carlo error and interval for a simulation (else null)."""

    estimate = fields.Float(required=True)
    mcse = fields.Float(required=True, allow_none=True)
    ci95 = _numbers(required=True, allow_none=True, metadata={"description": "[low, high]"})
    replicates = fields.Integer(required=True, allow_none=True)
    analytic = fields.Raw(
        allow_none=True,
        metadata={"description": "Simulations: the analytic power of the same question."},
    )


class TypeIErrorCheckSchema(OpenSchema):
    """The simulated test on the data model with the effect removed."""

    estimate = fields.Float(required=True)
    mcse = fields.Float(required=True)
    ci95 = _numbers(required=True, metadata={"description": "[low, high], Wilson"})
    replicates = fields.Integer(required=True)
    alpha = fields.Float(
        required=True, metadata={"description": "The level the test used (per comparison)."}
    )
    verdict = fields.String(required=True, validate=one_of(VERDICTS))
    null_model = fields.String(
        required=True, metadata={"description": "How the effect was removed."}
    )


class EffectResultSchema(OpenSchema):
    """find = effect: the solved effect field and its value."""

    field = fields.String(required=True, metadata={"description": "The solved effect field."})
    value = fields.Float(required=True)


class MethodResultSchema(OpenSchema):
    """How the answer was computed: the analysis, the approximation and the source."""

    method = fields.String(required=True, validate=one_of(METHODS))
    analysis = fields.String(required=True)
    analysis_label = fields.String(required=True)
    approximation = fields.String(required=True)
    reference = fields.String(required=True)
    derived = fields.Dict(
        keys=fields.String(),
        values=fields.Float(),
        required=True,
        metadata={"description": "Quantities derived from the question (the design's derive)."},
    )
    notes = fields.List(fields.String())
    alpha_note = fields.String()
    replicates = fields.Integer()
    description = fields.String()


class SearchCandidateSchema(OpenSchema):
    """One point of the simulated search."""

    replicates = fields.Integer(required=True)
    power = fields.Float(required=True)
    mcse = fields.Float(required=True)
    ci95 = _numbers(metadata={"description": "Confirmation points only."})


class SearchResultSchema(OpenSchema):
    """The simulated sample-size (or effect) search: candidates, confirmation, what was run."""

    start = fields.Raw(required=True, metadata={"description": "Where the search started."})
    start_source = fields.String(required=True)
    target = fields.Float(required=True)
    decision_rule = fields.String(required=True)
    search_replicates = fields.Integer(required=True)
    candidates = fields.List(fields.Nested(SearchCandidateSchema), required=True)
    confirmation = fields.List(fields.Nested(SearchCandidateSchema), required=True)
    moves = fields.Integer(required=True)
    replicates_run = fields.Dict(
        keys=fields.String(),
        values=fields.Integer(),
        metadata={"description": "search, full, null, total, minimum, draws"},
    )


class EventProbabilitySchema(OpenSchema):
    """The probability of an event by the end of follow-up."""

    control = fields.Float(required=True)
    treatment = fields.Float(required=True)
    mean = fields.Float(required=True)


class EventsResultSchema(OpenSchema):
    """Time to event: the events needed and the probability of an event."""

    required = fields.Integer(metadata={"description": "Events needed."})
    raw = fields.Float()
    probability = fields.Nested(EventProbabilitySchema)
    subjects_total_raw = fields.Float()
    basis = fields.String()
    calendar_time = fields.Float()
    time_unit = fields.String()
    simulated = fields.Raw(metadata={"description": "Simulations: mean events per replicate."})


class VersionsSchema(OpenSchema):
    """The versions that computed the record."""

    numpy = fields.String(required=True)
    scipy = fields.String(required=True)
    sizewise = fields.String(required=True)


class ReproducibilitySchema(OpenSchema):
    """What reproduces the record: the seed and its scheme (null for analytic), versions, hash."""

    seed = fields.Integer(required=True, allow_none=True)
    bit_generator = fields.String(required=True, allow_none=True)
    seed_scheme = fields.String(required=True, allow_none=True)
    chunk_size = fields.Integer(required=True, allow_none=True)
    versions = fields.Nested(VersionsSchema, required=True)
    record_sha256 = fields.String(
        required=True,
        metadata={"description": "SHA-256 of the canonical JSON of the record without it."},
    )


class AssuranceResultSchema(OpenSchema):
    """The assurance: power averaged over the prior on the effect."""

    estimate = fields.Float(required=True)
    power = fields.Float(required=True)
    ceiling = fields.Float(required=True)
    field = fields.String(required=True)
    reference = fields.String(required=True)
    target = fields.Float(allow_none=True)
    target_per_group = _whole(allow_none=True)
    prior = fields.Dict(keys=fields.String(), values=fields.Float(allow_none=True))


class SequentialResultSchema(OpenSchema):
    """With an interim block: per look the boundaries, nominal p, alpha spent and stopping
    probabilities; the inflation over the fixed design and the expected sizes."""

    looks = fields.List(fields.Dict(), required=True)
    inflation = fields.Float(required=True)
    reference = fields.String(required=True)


class ResultRecordSchema(OpenSchema):
    """The engine's result record (DEVELOPERS.md, "The result record"), sent unchanged."""

    record_version = fields.Integer(required=True)
    question = fields.Dict(
        required=True,
        metadata={"description": "The normalized question.", "x-question": True},
    )
    sample_size = fields.Nested(SampleSizeResultSchema, required=True)
    power = fields.Nested(PowerResultSchema, required=True)
    effect = fields.Nested(
        EffectResultSchema,
        required=True,
        allow_none=True,
        metadata={"description": "find = effect: the solved effect; else null."},
    )
    method = fields.Nested(MethodResultSchema, required=True)
    type_i_error = fields.Nested(
        TypeIErrorCheckSchema,
        required=True,
        allow_none=True,
        metadata={"description": "Simulations: the type I error check; null for analytic."},
    )
    search = fields.Nested(
        SearchResultSchema,
        required=True,
        allow_none=True,
        metadata={"description": "A simulated search; else null."},
    )
    events = fields.Nested(
        EventsResultSchema,
        required=True,
        allow_none=True,
        metadata={"description": "Time to event: the events needed; else null."},
    )
    sequential = fields.Nested(
        SequentialResultSchema, metadata={"description": "Only with an interim block."}
    )
    assurance = fields.Nested(
        AssuranceResultSchema, metadata={"description": "Only with an assurance block."}
    )
    reproducibility = fields.Nested(ReproducibilitySchema, required=True)
    cautions = fields.List(fields.String(), required=True)
    warnings = fields.List(fields.String(), required=True)
