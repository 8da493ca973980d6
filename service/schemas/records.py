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
    """One step from the raw solution to the enrolled numbers (rounding, dropout, clustering …);
    each step carries the members of its kind."""

    step = fields.String(required=True, metadata={"description": "What this step did."})
    per_group_raw = _numbers(metadata={"description": "Per group before this step's rounding."})
    per_group = _whole(metadata={"description": "Per group after this step."})
    analyzed_per_group = _numbers(metadata={"description": "Analyzed per group (find = power)."})
    fixed_per_group_raw = _numbers(metadata={"description": "interim: the fixed design's size."})
    inflation = fields.Float(metadata={"description": "interim: the maximum size's factor."})
    rate = fields.Float(metadata={"description": "dropout: the share lost."})
    factor = fields.Float(metadata={"description": "The factor the step applied."})
    rounding = fields.String(metadata={"description": "base: each_group or exact_ratio."})
    unit = fields.String(metadata={"description": "Clustered: people or clusters."})
    alpha = fields.Float()
    alpha_per_comparison = fields.Float()
    comparisons = fields.Integer()
    clusters_per_group = _whole()
    mean_cluster_size = fields.Float()
    analyzed_cluster_size = fields.Float()
    icc = fields.Float()
    cv = fields.Float()
    df = fields.Integer()
    power = fields.Float()


class ExactSearchSchema(OpenSchema):
    """An exact test's saw-toothed power curve: both n's, and which one is the answer."""

    first_reaching = fields.Integer(
        required=True, metadata={"description": "The smallest n whose power reaches the target."}
    )
    stays_above_from = fields.Integer(
        required=True,
        metadata={"description": "The smallest n from which every n up to checked_through does."},
    )
    answer = fields.String(required=True, metadata={"description": "Which n is the answer."})
    dips_below_target = _whole(
        required=True, metadata={"description": "The n between the two below the target."}
    )
    checked_through = fields.Integer(required=True)
    normal_approximation = fields.Float(
        required=True, metadata={"description": "The z-test n, unrounded, for comparison."}
    )


class TwoStageCharacteristicsSchema(OpenSchema):
    """A two-stage design: n1, r1, n, r and its exact operating characteristics."""

    criterion = fields.String(required=True)
    n1 = fields.Integer(required=True)
    r1 = fields.Integer(required=True)
    n = fields.Integer(required=True)
    r = fields.Integer(required=True)
    type_i_error = fields.Float(required=True)
    power = fields.Float(required=True)
    pet_null = fields.Float(required=True)
    expected_n_null = fields.Float(required=True)
    pet_alternative = fields.Float(required=True)
    expected_n_alternative = fields.Float(required=True)


class TwoStageDesignSchema(TwoStageCharacteristicsSchema):
    """The two-stage design found, the search's reach and the other criterion's design."""

    searched_max_n = fields.Integer(required=True)
    other_criterion = fields.Nested(TwoStageCharacteristicsSchema, allow_none=True)


class SampleSizeDetailsSchema(OpenSchema):
    """Details of an analytic find = sample_size answer, for the cells that have them."""

    exact_search = fields.Nested(ExactSearchSchema)
    two_stage = fields.Nested(TwoStageDesignSchema)


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
    clusters_per_group = _whole(metadata={"description": "Clustered: clusters per group."})
    mean_cluster_size = fields.Float(metadata={"description": "Clustered: the mean cluster size."})
    total_clusters = fields.Integer(metadata={"description": "Clustered: clusters in all."})
    details = fields.Nested(
        SampleSizeDetailsSchema,
        metadata={"description": "Analytic find = sample_size, for cells with details."},
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
        # a number, or a word (e.g. which planning value governs the answer)
        values=fields.Raw(metadata={"type": ["number", "string"]}),
        required=True,
        metadata={"description": "Quantities derived from the question (the design's derive)."},
    )
    notes = fields.List(fields.String())
    alpha_note = fields.String()
    replicates = fields.Integer()
    description = fields.String()
    data = fields.Dict(metadata={"description": "Simulations: the data model simulated."})
    decision = fields.Dict(metadata={"description": "Simulations: the test's decision rule."})
    summary_statistics = fields.Boolean(
        metadata={"description": "Simulations: drawn as summary statistics."}
    )
    implied_effect = fields.Dict(
        metadata={"description": "A posted data model: the effect it implies (source, fields)."}
    )


class SearchCandidateSchema(OpenSchema):
    """One point of the simulated search."""

    per_group = _whole(required=True)
    replicates = fields.Integer(required=True)
    power = fields.Float(required=True)
    mcse = fields.Float(required=True)
    ci95 = _numbers(metadata={"description": "Confirmation points only."})


class SearchSettledSchema(OpenSchema):
    """Why an n confirmation stopped without running n − 1: sizes one apart differ in simulated
    power by less than the Monte Carlo standard error of one full run."""

    pair = fields.List(
        fields.Nested(SearchCandidateSchema),
        required=True,
        metadata={"description": "The two sizes run together at the full count to settle."},
    )
    power_per_size = fields.Float(
        required=True,
        metadata={"description": "Fitted power gained per unit of the first group's size."},
    )
    mcse = fields.Float(
        required=True, metadata={"description": "Monte Carlo standard error of one full run."}
    )
    sizes_per_mcse = fields.Float(
        required=True,
        metadata={"description": "mcse / power_per_size: the answer's Monte Carlo error in sizes."},
    )
    failing_below = fields.Nested(
        SearchCandidateSchema,
        allow_none=True,
        metadata={"description": "The largest full run below the answer (short of the target)."},
    )


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
    settled = fields.Nested(
        SearchSettledSchema,
        metadata={
            "description": "Present when the n confirmation settled below Monte Carlo noise."
        },
    )


class EventProbabilitySchema(OpenSchema):
    """The probability of an event by the end of follow-up: per group (two groups) and their
    mean; one sample (Cox regression) has the mean only."""

    control = fields.Float()
    treatment = fields.Float()
    mean = fields.Float(required=True)


class SimulatedEventsSchema(OpenSchema):
    """Simulations: the events observed."""

    mean_per_replicate = fields.Float(required=True)
    replicates = fields.Integer(required=True)


class EventsResultSchema(OpenSchema):
    """Time to event: the events needed and the probability of an event."""

    required = fields.Integer(metadata={"description": "Events needed."})
    raw = fields.Float()
    probability = fields.Nested(EventProbabilitySchema)
    subjects_total_raw = fields.Float()
    basis = fields.String()
    calendar_time = fields.Float()
    time_unit = fields.String()
    simulated = fields.Nested(
        SimulatedEventsSchema, metadata={"description": "Simulations: mean events per replicate."}
    )


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


class StopProbabilitySchema(OpenSchema):
    """The probability of stopping at a look, for efficacy and for futility."""

    efficacy = fields.Float(required=True)
    futility = fields.Float(required=True)


class LookSchema(OpenSchema):
    """One planned analysis: its size, boundaries, nominal p, alpha spent, stopping chances."""

    look = fields.Integer(required=True)
    fraction = fields.Float(required=True)
    per_group = _whole(required=True)
    efficacy_z = fields.Float(required=True)
    efficacy_p = fields.Float(required=True)
    futility_z = fields.Float(required=True, allow_none=True)
    futility_p = fields.Float(required=True, allow_none=True)
    alpha_spent = fields.Float(required=True)
    stop_null = fields.Nested(StopProbabilitySchema, required=True)
    stop_alternative = fields.Nested(StopProbabilitySchema, required=True)


class SequentialResultSchema(OpenSchema):
    """With an interim block: per look the boundaries, nominal p, alpha spent and stopping
    probabilities; analytic: the inflation over the fixed design; simulated (``method``
    simulation): the replicates and the expected sizes' Monte Carlo errors."""

    looks = fields.List(fields.Nested(LookSchema), required=True)
    efficacy_spending = fields.String(required=True)
    futility_spending = fields.String(required=True)
    binding_futility = fields.Boolean(required=True)
    alternative = fields.String(required=True)
    reference = fields.String(required=True)
    inflation = fields.Float(metadata={"description": "Analytic: maximum size / fixed size."})
    fixed_power = fields.Float(metadata={"description": "Analytic: the fixed design's power."})
    drift = fields.Float()
    efficacy_gamma = fields.Float()
    futility_gamma = fields.Float()
    method = fields.String(metadata={"description": "simulation, when the test was simulated."})
    replicates = fields.Integer(metadata={"description": "Simulated: replicates."})
    expected_total_null = fields.Float()
    expected_total_alternative = fields.Float()
    expected_total_null_mcse = fields.Float(allow_none=True)
    expected_total_alternative_mcse = fields.Float(allow_none=True)
    expected_analyzed_null = fields.Float()
    expected_analyzed_alternative = fields.Float()


class PrecisionIntervalSchema(OpenSchema):
    """One of several intervals of a precision question."""

    estimand = fields.String(required=True, metadata={"description": "What it estimates."})
    half_width_expected = fields.Float(required=True)
    expected_subjects = fields.Float(
        required=True, metadata={"description": "The subjects it is computed among (expected)."}
    )
    subjects = fields.String(
        required=True, metadata={"description": "Who they are, in words ('cases')."}
    )


class PrecisionResultSchema(OpenSchema):
    """A precision question (hypothesis.aim estimation): the interval's half-widths."""

    interval = fields.String(required=True, metadata={"description": "The analysis label."})
    confidence = fields.Float(required=True)
    half_width_target = fields.Float(
        required=True, allow_none=True, metadata={"description": "null for find = precision"}
    )
    half_width_expected = fields.Float(required=True)
    assurance = fields.Float(required=True, allow_none=True)
    half_width_assured = fields.Float(required=True, allow_none=True)
    probability = fields.Float(
        required=True,
        allow_none=True,
        metadata={"description": "P(half-width <= target) at the analyzed size, or null."},
    )
    basis = fields.String(required=True, metadata={"description": "How it was computed."})
    intervals = fields.List(
        fields.Nested(PrecisionIntervalSchema),
        metadata={
            "description": "Only when the cell estimates several quantities at once (sensitivity "
            "and specificity): each interval's expected half-width; half_width_expected is the "
            "widest."
        },
    )
    wider = fields.String(
        metadata={
            "description": "With intervals: the estimand whose interval is the widest (it sets "
            "the sample size)."
        }
    )


class ShareSchema(OpenSchema):
    """A simulated share and its Monte Carlo standard error."""

    estimate = fields.Float(required=True)
    mcse = fields.Float(required=True)


class ProcedurePowerSchema(OpenSchema):
    """A procedure's power: for each comparison, for at least one, for all."""

    each = fields.Nested(ShareSchema, required=True)
    any = fields.Nested(ShareSchema, required=True)
    all = fields.Nested(ShareSchema, required=True)


class MultiplicityResultSchema(OpenSchema):
    """Holm or Hochberg for k comparisons: their power at the Bonferroni size, simulated."""

    procedure = fields.String(required=True)
    comparisons = fields.Integer(required=True)
    correlation = fields.Float(required=True)
    alpha = fields.Float(required=True)
    drift = fields.Float(required=True)
    power = fields.Nested(ProcedurePowerSchema, required=True)
    bonferroni = fields.Nested(ProcedurePowerSchema, required=True)
    replicates = fields.Integer(required=True)
    seed = fields.Integer(required=True)
    method = fields.String(required=True)
    reference = fields.String(required=True)


class ResultRecordSchema(OpenSchema):
    """The engine's result record (DEVELOPERS.md, "The result record"), sent unchanged."""

    record_version = fields.Integer(required=True)
    question = fields.Dict(
        required=True,
        metadata={"description": "The normalized question.", "x-question": True},
    )
    sample_size = fields.Nested(SampleSizeResultSchema, required=True)
    power = fields.Nested(
        PowerResultSchema,
        required=True,
        allow_none=True,
        metadata={"description": "The power; null for a precision question."},
    )
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
    precision = fields.Nested(
        PrecisionResultSchema,
        metadata={"description": "Only for a precision question (hypothesis.aim estimation)."},
    )
    multiplicity = fields.Nested(
        MultiplicityResultSchema,
        metadata={"description": "Only with adjustments.multiplicity holm or hochberg."},
    )
    reproducibility = fields.Nested(ReproducibilitySchema, required=True)
    cautions = fields.List(fields.String(), required=True)
    warnings = fields.List(fields.String(), required=True)
