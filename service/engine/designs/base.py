"""What a design is: frozen declarations plus pure functions, read by every layer of sizewise.

A design is one cell of outcome × layout ("continuous outcome, two groups"). Its module declares
its fields (the single source of the schema, the catalogue, OpenAPI and the JSON Schema), the
analyses it offers, its analytic methods, its simulation model and its phrases. The machinery
(compute, the simulator, the search, the schemas, the report) reads these objects and never a
cell's name. Stdlib only: the schema layer imports this without numpy.

The functions receive the *normalized* question ``q`` (DEVELOPERS.md, "The question") and, for the
analytic methods, the alpha already split for multiple comparisons; they never round.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

BLOCKS = ("effect", "assumptions", "analysis_options")
AIMS = ("superiority", "noninferiority", "equivalence", "estimation")
# The aims that test a hypothesis; "estimation" asks for a confidence interval's precision.
TESTING_AIMS = ("superiority", "noninferiority", "equivalence")
METHODS = ("analytic", "simulation")


@dataclass(frozen=True)
class Field:
    """One declared input field of a cell (see VOCAB §8)."""

    name: str
    block: str  # "effect" | "assumptions" | "analysis_options"
    type: str  # "number" | "integer" | "boolean" | "choice" | "number_list"
    help: str  # one sentence, US English
    label: str  # the human phrase used in prose
    unit: str | None = None  # "outcome units" | "proportion" | "per time unit" | "time units"
    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: bool = False
    exclusive_maximum: bool = False
    choices: tuple[str, ...] = ()
    default: object = None  # None: no default
    min_items: int | None = None  # number_list only

    @property
    def path(self) -> str:
        """The dotted question path of the field, e.g. ``assumptions.sd``."""
        return f"{self.block}.{self.name}"

    def range_error(self, value: object) -> str | None:
        """Return why ``value`` is outside the declared range, or None (numbers only)."""
        if not isinstance(value, (int, float)) or isinstance(value, bool):
            return None
        lo, hi = self.minimum, self.maximum
        low_bad = lo is not None and (value <= lo if self.exclusive_minimum else value < lo)
        high_bad = hi is not None and (value >= hi if self.exclusive_maximum else value > hi)
        if not (low_bad or high_bad) and math.isfinite(value):
            return None
        return f"must be {self.range_text()}; got {value:g}"

    def range_text(self) -> str:
        """The allowed range in words: 'greater than 0', 'between 0 and 1 (exclusive)'."""
        lo, hi = self.minimum, self.maximum
        if lo is not None and hi is not None:
            ends = "exclusive" if self.exclusive_minimum and self.exclusive_maximum else "inclusive"
            if self.exclusive_minimum != self.exclusive_maximum:
                ends = "lower end exclusive" if self.exclusive_minimum else "upper end exclusive"
            return f"between {lo:g} and {hi:g} ({ends})"
        if lo is not None:
            return f"{'greater than' if self.exclusive_minimum else 'at least'} {lo:g}"
        if hi is not None:
            return f"{'less than' if self.exclusive_maximum else 'at most'} {hi:g}"
        return "a finite number"


@dataclass(frozen=True)
class Analysis:
    """A test the study will use, as offered by a cell."""

    name: str  # "welch_t"
    label: str  # "Welch's t test"
    methods: tuple[str, ...]  # which of "analytic", "simulation" honor it
    aims: tuple[str, ...]  # the hypothesis aims it answers
    reference: str  # "Welch 1947; power by the noncentral t"
    # How an analytic sample size is found when it comes from an exact search over whole sizes
    # (enumeration) rather than a formula, in the report's words ("the smallest n …"); such an
    # answer has no unrounded value. None: a formula's (or a root's) unrounded n, rounded up.
    size_search: str | None = None


@dataclass(frozen=True)
class Solution:
    """An analytic solve: raw (unrounded) n per group and cell-specific details (e.g. events).

    ``details["events"]`` becomes the record's ``events`` block and
    ``details["sample_size_details"]`` the record's ``sample_size.details`` (a cell's own answer
    details: the exact search's two n's, a two-stage design's stage rules).
    """

    per_group: list[float]
    details: dict = field(default_factory=dict)


@dataclass(frozen=True)
class DecisionRule:
    """How a simulated test decides: aim, alternative, the outcome direction and the margin.

    ``direction`` is +1 when the alternative is "higher on the outcome scale", −1 when lower
    (for a log-rank z the statistic's sign; see plan). Stored in chunk tasks as a dict.
    """

    aim: str
    alternative: str  # "two-sided" | "one-sided"
    direction: int
    margin: float | None

    @property
    def tails(self) -> int:
        return 2 if self.alternative == "two-sided" else 1

    def to_dict(self) -> dict:
        return {
            "aim": self.aim,
            "alternative": self.alternative,
            "direction": self.direction,
            "margin": self.margin,
        }

    def facing(self, direction: int) -> DecisionRule:
        """The same rule looking towards ``direction``."""
        return DecisionRule(self.aim, self.alternative, direction, self.margin)


@dataclass(frozen=True)
class EffectAxis:
    """How a find = effect search moves the solved field: value = origin + sign·x, 0 < x ≤ x_max.

    ``inclusive`` when x_max itself is a valid effect (a difference of 0 under equivalence).
    """

    origin: float
    sign: int
    x_max: float
    inclusive: bool = False

    def value(self, x: float) -> float:
        return self.origin + self.sign * x


@dataclass(frozen=True)
class SimulationModel:
    """How a cell is simulated.

    data_keys : the keys of a posted ``simulation.data`` (e.g. ("control", "treatment")), or
        ("groups",) for a list of groups; () when the cell takes no posted data model.
    default_data : q -> the group data models built from effect and assumptions.
    null_data : (q, models, rule) -> (the models with the effect removed, a sentence saying how).
    kernels : analysis name -> kernel name in ``service.engine.kernels``.
    check_models : optional (q, models, labels) -> None, refusing families the cell cannot use.
    settings : optional q -> the cell's extra settings a chunk needs (e.g. the survival timeline).
    data_block : optional (models, labels, settings) -> the record's ``method.data``.
    effect_axis : (q, rule) -> EffectAxis for find = effect.
    implied_contrast : optional models -> the effect the models imply on the outcome scale
        (for one-sided direction), None when undefined.
    implied_fields : optional models -> {"fields", "missing", "note"} a posted data model implies.
    approximate_n : optional (plan, target) -> a normal-approximation first-group size or None.
    planned_moments : optional q -> (control mean, difference, sd_control, sd_treatment) of the
        planned data, for the robustness panel's departures; None: the panel is not offered.
    direction_sign : +1, or −1 when the test statistic falls as the outcome improves (log-rank).
    min_size : the smallest group size the analyses accept.
    draws_words : how one replicate is drawn ("draws …"), for the method's description; None:
        the generic words (every observation, or each group's summary statistics).
    """

    data_keys: tuple[str, ...]
    default_data: Callable[[dict], list[dict]]
    null_data: Callable[[dict, list[dict], DecisionRule], tuple[list[dict], str]]
    kernels: Mapping[str, str]
    effect_axis: Callable[[dict, DecisionRule], EffectAxis]
    check_models: Callable[[dict, list[dict], list[str]], None] | None = None
    settings: Callable[[dict], dict] | None = None
    data_block: Callable[[list[dict], list[str], dict], dict] | None = None
    implied_contrast: Callable[[list[dict]], float | None] | None = None
    implied_fields: Callable[[dict, list[dict]], dict] | None = None
    approximate_n: Callable[[object, float], float | None] | None = None
    planned_moments: Callable[[dict], tuple[float, float, float, float]] | None = None
    direction_sign: int = 1
    min_size: int = 2
    # how one replicate is drawn, in words ("draws …"), when the generic words do not fit
    draws_words: str | None = None


@dataclass(frozen=True)
class ClusterSupport:
    """How a two-group cell is answered when whole clusters are randomized.

    scale : q -> (difference on the outcome scale, variance per person in control, in treatment).
    effect_top : (q, sign) -> the farthest distance from the null value a find = effect search
        looks (the solved field moves from ``null_effect(q)`` by sign·x, 0 < x ≤ top).
    family : the data-model family of the simulated cluster outcomes ("normal", "bernoulli").
    analyses : the analyses a cluster simulation accepts (all become the cluster-level t test).
    note : an extra method note, or None.
    """

    scale: Callable[[dict], tuple[float, float, float]]
    effect_top: Callable[[dict, float], float]
    family: str
    analyses: tuple[str, ...]
    note: str | None = None


@dataclass(frozen=True)
class Phrases:
    """Plain functions returning US-English sentences for the justification.

    effect : (q, record) -> the effect sentence, from what the investigator entered (for find =
        effect, the solved value from the record).
    assumptions : q -> the assumptions sentence ("SD 8 and correlation 0.6"), '' when none.
    margin : optional q -> the hypothesis margin in words, for a cell whose margin is not on the
        effect's own scale (a ratio's limits given on the log scale); None: the number itself.
    """

    effect: Callable[[dict, dict | None], str]
    assumptions: Callable[[dict], str]
    # optional q -> the groups' names in prose, in group order ("control", "treatment 1", …)
    group_names: Callable[[dict], list[str]] | None = None
    margin: Callable[[dict], str] | None = None
    # optional q -> what a precision question estimates and the planning values it assumes
    # ("the mean, assuming a standard deviation of 20"); None: "the estimand" + assumptions
    estimand: Callable[[dict], str] | None = None

    # optional record -> sentences on the cell's own answer details (the exact search's two
    # n's, a two-stage design's stage rules), '' when there are none
    details: Callable[[dict], str] | None = None
    # optional record -> the solved or posted size in the cell's own words, for a cell whose
    # size takes no adjustment (a two-stage design's maximum and expected sizes); None: "<n>
    # participants are needed before adjustment" (find = power: "With <n> participants
    # enrolled"). With it the shared "The power at the analyzed size is …" is left out: the
    # cell's ``details`` state its power in its own words.
    size: Callable[[dict], str] | None = None
    # optional record -> the report's answer figures [(value, label)] in the cell's own words,
    # for a cell whose answer is not one enrolled number and its power (a two-stage design's
    # maximum and expected sizes, its exact power and type I error); None: "<N> enrolled in
    # total" and the power. A simulated power is still shown beside them.
    figures: Callable[[dict], list[tuple[str, str]]] | None = None
    # optional record -> the report's table in place of the adjustment steps, for a cell that
    # takes no adjustment (a two-stage design's stages): {"title", "caption", "name_heading",
    # "heading", "rows": [{"name", "detail", "result"}]}; None: the adjustment steps
    stages: Callable[[dict], dict] | None = None
    # optional: the report's label of a posted size (find = power) when it is not simply the
    # number enrolled (a two-stage design's n is reached only in stage 2); None: "Enrolled"
    enrolled: str | None = None
    # optional (heading, sample_size.details -> words): a sensitivity grid's column for a cell
    # whose answer is more than its size (a two-stage design's stage rules), '' for a cell
    # without details; None: no such column
    grid_column: tuple[str, Callable[[dict | None], str]] | None = None


@dataclass(frozen=True)
class Estimation:
    """How a cell answers a precision question (``hypothesis.aim = "estimation"``).

    forms : the accepted field sets of an estimation question, as ``Design.forms`` (a field
        outside every form, such as a mean's ``difference``, is refused: the interval's width
        does not depend on it).
    precision : (q, per_group) -> {"half_width_expected": the half-width expected at these
        (analyzed, possibly fractional) sizes, "half_width_assured": the half-width not exceeded
        with probability ``hypothesis.assurance`` (None without it), "probability": the
        probability that the half-width is at most ``hypothesis.half_width`` (None when it is not
        computed, e.g. without assurance)}. ``solve_n(q, alpha)`` answers find = sample_size
        with alpha = 1 − confidence; the shared math is ``service/engine/precision.py``.
    assurance : True when the cell's intervals take ``hypothesis.assurance``.
    expected_words : what "the half-width is at most the target" means without an assurance,
        in the report's words (the record's ``precision.basis`` says how it is computed).
    interval_words : optional q -> the intervals in words, for a cell that estimates several
        quantities at once ("two two-sided 95% confidence intervals, one for …"); its
        ``precision`` then also returns ``intervals`` (one {"estimand", "half_width_expected",
        "expected_subjects", "subjects"} each; the record's half_width_expected is the widest)
        and ``wider`` (the estimand whose interval is the widest: it sets the sample size).
        None: one interval, in the report's shared words.
    precision_words : optional record -> the half-width sentence of such a cell, read from the
        record's ``precision.intervals`` and ``wider``; None: the shared sentence.
    """

    forms: tuple[tuple[str, ...], ...]
    precision: Callable[[dict, list[float]], dict]
    assurance: bool = False
    expected_words: str = "on average (the expected half-width)"
    interval_words: Callable[[dict], str] | None = None
    precision_words: Callable[[dict], str] | None = None


@dataclass(frozen=True)
class Design:
    """Everything sizewise knows about one cell of outcome × layout.

    contrast : q -> the assumed effect minus its null value on the outcome scale (for time to
        event, −ln HR: positive when times are longer), None when not given.
    null_effect : q -> the solved field's null value (0 for a difference, p_control …).
    groups / allocation : q -> number of groups and their relative sizes (control first).
    solve_n : (q, alpha) -> Solution at q["target_power"].
    power : (q, per_group, alpha) -> analytic power at the given (possibly fractional) sizes.
    solve_effect : (q, per_group, alpha) -> {"field": name, "value": x} reaching target power.
    describe : q -> the analytic ``method`` block (analysis, label, approximation, reference).
    warnings_for : (q, per_group) -> plain-language warnings (approximation limits).
    """

    outcome: str
    layout: str
    label: str
    fields: tuple[Field, ...]
    forms: tuple[tuple[str, ...], ...]
    solved: str
    analyses: tuple[Analysis, ...]
    validate: Callable[[dict, str, bool], dict[str, list[str]]]
    default_analysis: Callable[[dict], str]
    groups: Callable[[dict], int]
    allocation: Callable[[dict], list[float]]
    derive: Callable[[dict], dict]
    solve_n: Callable[[dict, float], Solution]
    power: Callable[[dict, list[float], float], float]
    solve_effect: Callable[[dict, list[float], float], dict]
    describe: Callable[[dict], dict]
    warnings_for: Callable[[dict, list[float]], list[str]]
    simulation: SimulationModel | None
    phrases: Phrases
    example: str
    contrast: Callable[[dict], float | None]
    null_effect: Callable[[dict], float | None]
    cluster: ClusterSupport | None = None  # None: cluster randomization is not offered
    directional: bool = True  # False: the tests have no direction (F), one-sided is refused
    # True: the design tests in one direction by construction (Simon's two-stage design): the
    # alternative defaults to one-sided and two-sided is refused
    one_sided_only: bool = False
    # True: the test statistic is asymptotically normal with independent increments, so the
    # question may plan interim analyses (the ``interim`` block, engine/sequential.py)
    sequential: bool = False
    notes: tuple[str, ...] = ()  # cell-level notes for the catalogue
    # (q, enrolled per_group, events block) -> keys added to the record's events block (the
    # calendar time the required events are expected); None: the cell counts no events.
    events_timing: Callable[[dict, list[float], dict], dict] | None = None
    # True when a noninferiority margin is posted on the effect field's own scale (a hazard
    # ratio above 1) rather than as a contrast; the design's own solve_n checks it then.
    margin_on_effect: bool = False
    # The one-sided level of each test against equivalence limits when none is posted, and why.
    equivalence_alpha: float = 0.025
    equivalence_alpha_source: str = (
        "the level regulatory guidance expects of such trials (ICH E9, 1998)"
    )
    # How the cell answers hypothesis.aim = "estimation" (precision questions); None: not offered.
    # An analysis whose ``aims`` hold "estimation" must be offered with it.
    estimation: Estimation | None = None
    # record -> the curve the report draws instead of power against the enrolled size, for a
    # design whose size is fixed by its own rules (Simon's two-stage design: power against the
    # true rate). Keys: title, x_label, y_label, x, power (lists), marks ([{x, power, label}]),
    # caption (the sentence under the drawing). None: the power curve against n.
    operating_curve: Callable[[dict], dict] | None = None

    @property
    def cell(self) -> str:
        """The cell as people read it in messages: 'continuous × two_groups'."""
        return f"{self.outcome} × {self.layout}"

    def field(self, name: str) -> Field:
        """Return the declared field called ``name``; KeyError when there is none."""
        for f in self.fields:
            if f.name == name:
                return f
        raise KeyError(name)

    def analysis(self, name: str) -> Analysis:
        """Return the offered analysis called ``name``; KeyError when there is none."""
        for a in self.analyses:
            if a.name == name:
                return a
        raise KeyError(name)

    def analyses_for(self, method: str, aim: str | None = None) -> tuple[str, ...]:
        """Names of the analyses a method honors (and, given an aim, that answer it)."""
        return tuple(
            a.name for a in self.analyses if method in a.methods and (aim is None or aim in a.aims)
        )

    def aims(self) -> tuple[str, ...]:
        """Every hypothesis aim some analysis of the cell answers, in AIMS order; estimation
        only when the cell declares how (``estimation``), so a testing analysis that lists
        ``AIMS`` instead of ``TESTING_AIMS`` offers no precision question by mistake."""
        offered = {aim for a in self.analyses for aim in a.aims}
        if self.estimation is None:
            offered.discard("estimation")
        return tuple(a for a in AIMS if a in offered)
