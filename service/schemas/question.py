"""The question schema: validate a posted sample-size question and return its normalized form.

``QuestionSchema().load(raw)`` returns the dict described in DEVELOPERS.md ("The question"),
every default filled in. ``load_question(raw)`` does the same but raises ``QuestionInvalid``
with dotted field paths, the shape the API and the CLI print.

Numbers are strict: JSON numbers only (no strings, no booleans, no NaN or infinity). Every
message names what is allowed and echoes the posted value. Ranges live in the fields' metadata
(``minimum``, ``exclusiveMinimum`` … in the JSON Schema 2020-12 / OpenAPI 3.1 form) so the
OpenAPI document and the design catalogue show the same limits the validator enforces.

The parts live beside this module: ``fields`` (strict fields, intervals, the ``Strict`` base
schema, message helpers), ``vocabulary`` (allowed words, arm counts), ``data_models``
(simulation arms and data shapes), ``effects`` (one effect schema per design) and ``blocks``
(sample size, hypothesis, adjustments, simulation). This module holds the cross-field rules,
the normalization and the entry points; every public name of the parts is importable here.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from marshmallow import ValidationError, post_load, validates_schema

from service.engine import direction
from service.engine.adjust import split_total
from service.engine.designs import DESIGN_NAMES, FORMULAS, TESTS
from service.engine.errors import QuestionError
from service.engine.models import check_arm

from .blocks import (
    AdjustmentsSchema,
    ClusterSchema,
    HypothesisSchema,
    SampleSizeSchema,
    SimulationField,
    SimulationSchema,
)
from .data_models import (
    ARM_FAMILIES,
    ARM_SCHEMAS,
    CONTINUOUS_AND_COUNT,
    DATA_SCHEMAS,
    DATA_SHAPES,
    FAMILIES,
    FAMILY_PARAMS,
    Arm,
    ArmBase,
    ArmList,
    DataModel,
    families_for,
)
from .effects import (
    EFFECT_SCHEMAS,
    AnovaEffectSchema,
    CorrelationEffectSchema,
    Effect,
    EffectBase,
    OneMeanEffectSchema,
    PairedMeanEffectSchema,
    RankSumEffectSchema,
    SurvivalEffectSchema,
    TwoMeansEffectSchema,
    TwoProportionsEffectSchema,
    posts_data_model,
)
from .errors import QuestionInvalid
from .fields import (
    CORR,
    NONNEG,
    POSITIVE,
    REAL,
    UNIT_HALF_OPEN,
    UNIT_OPEN,
    Choice,
    Flag,
    Interval,
    Number,
    NumberList,
    Obj,
    Strict,
    Text,
    Whole,
    got,
    kind_of,
    number_text,
    posted,
    put_error,
    raise_errors,
    show,
)
from .shared import shared
from .vocabulary import (
    DECISION_RULES,
    FINDS,
    KINDS,
    MARGIN_DESIGNS,
    MAX_N,
    METHODS,
    SEED_LIMIT,
    TWO_ARM,
    allocation_weights,
    arm_count,
    valid_design,
    valid_find,
)

# Every name the schema layer had in one module stays importable from here.
__all__ = [
    "ARM_FAMILIES",
    "ARM_SCHEMAS",
    "CONTINUOUS_AND_COUNT",
    "CORR",
    "DATA_SCHEMAS",
    "DATA_SHAPES",
    "DECISION_RULES",
    "DESIGN_NAMES",
    "EFFECT_SCHEMAS",
    "FAMILIES",
    "FAMILY_PARAMS",
    "FINDS",
    "FORMULAS",
    "KINDS",
    "MARGIN_DESIGNS",
    "MAX_N",
    "METHODS",
    "NONNEG",
    "POSITIVE",
    "REAL",
    "SEED_LIMIT",
    "TESTS",
    "TWO_ARM",
    "UNIT_HALF_OPEN",
    "UNIT_OPEN",
    "AdjustmentsSchema",
    "AnovaEffectSchema",
    "Arm",
    "ArmBase",
    "ArmList",
    "Choice",
    "ClusterSchema",
    "CorrelationEffectSchema",
    "DataModel",
    "Effect",
    "EffectBase",
    "Flag",
    "HypothesisSchema",
    "Interval",
    "Number",
    "NumberList",
    "Obj",
    "OneMeanEffectSchema",
    "PairedMeanEffectSchema",
    "QuestionInvalid",
    "QuestionSchema",
    "RankSumEffectSchema",
    "SampleSizeSchema",
    "SimulationField",
    "SimulationSchema",
    "Strict",
    "SurvivalEffectSchema",
    "Text",
    "TwoMeansEffectSchema",
    "TwoProportionsEffectSchema",
    "Whole",
    "allocation_weights",
    "arm_count",
    "families_for",
    "flatten_errors",
    "got",
    "kind_of",
    "load_question",
    "number_text",
    "posted",
    "put_error",
    "raise_errors",
    "register_openapi_types",
    "show",
    "split_total",
    "valid_design",
    "valid_find",
]

# ---------------------------------------------------------------------------------------------
# The question


class QuestionSchema(Strict):
    """A sample-size, power or detectable-effect question; ``load`` returns the normalized form."""

    design = Choice(DESIGN_NAMES, required=True, description="the study design")
    find = Choice(FINDS, load_default="sample_size", description="what to solve for")
    alpha = Number(
        Interval(0, 0.5, low_open=True),
        description="type I error rate (before any Bonferroni split); default 0.05, and 0.025 "
        "(one-sided) for noninferiority and equivalence (ICH E9, 1998)",
    )
    sides = Whole(
        Interval(1, 2),
        description="1 or 2; default 2 for superiority, 1 for noninferiority/equivalence",
    )
    target_power = Number(
        Interval(0, 1, low_open=True, high_open=True),
        description="power to reach, in (alpha, 1); default 0.80 (common practice); "
        "not used when find = power",
    )
    sample_size = Obj(
        SampleSizeSchema,
        description="enrolled numbers for find = power or effect; absent for find = sample_size",
    )
    allocation_ratio = Number(
        Interval(0, 1000, low_open=True),
        description="treatment:control allocation, default 1 (two-arm designs only)",
    )
    allocation_rounding = Choice(
        ("each_arm", "exact_ratio"),
        description="how a solved size becomes whole subjects: each_arm (default) rounds every "
        "arm up on its own; exact_ratio rounds up to the smallest whole sizes in exactly the "
        "allocation ratio (a ratio that is a fraction with denominator at most 100)",
    )
    effect = Effect(
        allow_none=True,
        load_default=None,
        metadata={"description": "design-specific effect fields (see GET /v1/designs)"},
    )
    hypothesis = Obj(
        HypothesisSchema, description="superiority (default), noninferiority or equivalence"
    )
    adjustments = Obj(AdjustmentsSchema, description="dropout, clustering and multiple comparisons")
    method = Choice(METHODS, description="analytic (default) or simulation")
    formula = Text(description="analytic formula; one of the design's formulas (default the first)")
    simulation = SimulationField(
        SimulationSchema, description="Monte Carlo settings for method = simulation"
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _cross_field(self, data: dict, original_data: Any, **kwargs: Any) -> None:
        if not isinstance(original_data, Mapping):
            return
        errors: dict = {}
        design = valid_design(original_data) if "design" in data else None
        find = data.get("find") if "find" in data else None
        raw = original_data

        # find and the sample size
        if find == "sample_size" and posted(raw, "sample_size"):
            put_error(
                errors,
                ("sample_size",),
                "must be absent when find = sample_size (it is what is solved for); "
                f"got {show(raw['sample_size'])}",
            )
        if find in ("power", "effect") and not posted(raw, "sample_size"):
            put_error(
                errors,
                ("sample_size",),
                f'is required when find = {find}: {{"per_arm": [n, ...]}} or {{"total": N}}',
            )
        if find == "power" and posted(raw, "target_power"):
            put_error(
                errors,
                ("target_power",),
                f"is not used when find = power (power is what is solved for); "
                f"got {show(raw['target_power'])}",
            )
        hyp_kind = (data.get("hypothesis") or {}).get("kind", "superiority")
        alpha, target = data.get("alpha"), data.get("target_power")
        if alpha is None:
            alpha = default_alpha(hyp_kind)
        if alpha is not None and target is not None and not target > alpha:
            put_error(
                errors,
                ("target_power",),
                f"must be in (alpha, 1) = ({number_text(alpha)}, 1); got {show(target)}",
            )

        hyp = data.get("hypothesis") or {}
        kind = (
            hyp.get("kind", "superiority")
            if "hypothesis" in data or not posted(raw, "hypothesis")
            else None
        )
        if kind in ("noninferiority", "equivalence"):
            if data.get("sides") == 2:
                put_error(
                    errors, ("sides",), f"must be 1 for {kind} (one-sided by construction); got 2"
                )
            if design is not None and design not in MARGIN_DESIGNS:
                put_error(
                    errors,
                    ("hypothesis", "kind"),
                    f"{kind} is offered only for {', '.join(MARGIN_DESIGNS)}; "
                    f"got {show(kind)} with design {show(design)}",
                )
            margin = hyp.get("margin")
            if design == "two_proportions" and margin is not None and not abs(margin) < 1:
                put_error(
                    errors,
                    ("hypothesis", "margin"),
                    f"must be in (-1, 1) for two_proportions (a difference of proportions); "
                    f"got {show(margin)}",
                )

        if design is None:
            raise_errors(errors)
            return

        # The F test has no sides: a posted 1 would be silently ignored. 2 stays accepted only
        # because the normalized form carries it, so a normalized question loads again unchanged.
        if design == "anova_oneway" and posted(raw, "sides") and raw["sides"] != 2:
            put_error(
                errors,
                ("sides",),
                "does not apply to anova_oneway (the F test rejects for large F only, it has no "
                f"sides); remove it; got {show(raw['sides'])}",
            )

        # 1 is accepted everywhere so a normalized question loads again unchanged.
        if (
            posted(raw, "allocation_ratio")
            and design not in TWO_ARM
            and raw["allocation_ratio"] != 1
        ):
            put_error(
                errors,
                ("allocation_ratio",),
                f"applies only to two-arm designs ({', '.join(TWO_ARM)}); "
                f"got {show(raw['allocation_ratio'])} for design {show(design)}",
            )

        rounding = data.get("allocation_rounding")
        if rounding == "exact_ratio":
            why = None
            if design not in TWO_ARM:
                why = f"applies only to two-arm designs ({', '.join(TWO_ARM)})"
            elif find != "sample_size":
                why = "applies only when find = sample_size (the enrolled numbers are given)"
            elif posted(raw, "method") and raw.get("method") == "simulation":
                why = (
                    "is offered for analytic answers; a simulated search sizes the arms "
                    "itself (use each_arm)"
                )
            elif (data.get("adjustments") or {}).get("cluster") is not None:
                why = (
                    "is not offered with a cluster block: clusters are enrolled whole, each arm "
                    "rounded to whole clusters (use each_arm)"
                )
            elif data.get("allocation_ratio") is not None and not _simple_ratio(
                data["allocation_ratio"]
            ):
                why = (
                    "needs an allocation_ratio that is a fraction with denominator at most 100 "
                    f"(e.g. 3 or 1.5); got allocation_ratio {show(data['allocation_ratio'])}"
                )
            if why:
                put_error(errors, ("allocation_rounding",), f'{why}; got "exact_ratio"')

        formula = data.get("formula")
        if formula is not None and formula not in FORMULAS[design]:
            put_error(
                errors,
                ("formula",),
                f"must be one of {', '.join(FORMULAS[design])} for {design}; {got(formula)}",
            )
        elif formula is not None and design == "two_proportions" and kind is not None:
            from service.engine.designs.proportions import APPLIES

            if formula not in APPLIES[kind]:
                put_error(
                    errors,
                    ("formula",),
                    f"does not apply to a {kind} question of two proportions; use one of "
                    f"{', '.join(APPLIES[kind])} (default {APPLIES[kind][0]}); {got(formula)}",
                )

        # the effect block (absent: report its required fields)
        effect = data.get("effect")
        if not posted(raw, "effect"):
            schema = EFFECT_SCHEMAS[design](
                find=find or "sample_size", from_data=posts_data_model(raw, find)
            )
            missing = schema.validate({})
            for name, messages in missing.items():
                for message in messages:
                    put_error(errors, ("effect", name), message)
            effect = None if missing else schema.load({})

        # method and simulation
        sim = data.get("simulation")
        sim_posted = posted(raw, "simulation")
        sim_data = (sim or {}).get("data")
        method = (data.get("method") or "invalid") if posted(raw, "method") else None
        prob = (effect or {}).get("prob_superiority")
        if method is None:
            only_model = design == "rank_sum" and prob is None and sim_data is not None
            method = "simulation" if only_model else "analytic"
        if method == "analytic" and sim_posted:
            put_error(
                errors,
                ("simulation",),
                'is given but method is analytic; set method to "simulation" or remove it',
            )
        if find == "effect" and method == "simulation" and sim_data is not None:
            # The search moves one effect field in arms built from the effect block.
            put_error(
                errors,
                ("simulation", "data"),
                "is not accepted for find = effect: a posted data model has no single effect "
                "parameter to move; remove simulation.data (the arms are built from the effect "
                "fields) or ask find = power for each candidate data model; got a data model"
                + (
                    f" with keys {', '.join(map(str, sim_data))}"
                    if isinstance(sim_data, Mapping)
                    else ""
                ),
            )
        if design == "rank_sum" and find != "effect" and effect is not None and prob is None:
            if sim_data is None:
                put_error(
                    errors,
                    ("effect", "prob_superiority"),
                    "is required: a number in (0, 1), unless simulation.data gives a data model; "
                    "got neither",
                )
            elif method == "analytic" and posted(raw, "method"):
                put_error(
                    errors,
                    ("effect", "prob_superiority"),
                    "is required for method = analytic (the Noether formula needs it): "
                    "a number in (0, 1)",
                )

        if effect is not None and "effect" not in errors:
            self._effect_rules(errors, design, find, hyp if kind else {}, effect)
            if kind == "superiority" and posted(raw.get("hypothesis"), "higher_is_better"):
                one = {"sides": data.get("sides"), "hypothesis": hyp, "effect": effect}
                why = direction.conflict(one, design, _implied(design, method, sim_data))
                if why:
                    put_error(errors, ("hypothesis", "higher_is_better"), why)

        # arms: sample size shape, ANOVA data model size
        arms = arm_count(design, effect) if effect is not None else None
        size = data.get("sample_size")
        if arms is not None and size is not None and size.get("per_arm") is not None:
            if len(size["per_arm"]) != arms:
                put_error(
                    errors,
                    ("sample_size", "per_arm"),
                    f"must list {arms} number(s), one per arm (control first); "
                    f"got {len(size['per_arm'])}: {show(size['per_arm'])}",
                )
        if arms is not None and size is not None and size.get("total") is not None:
            ratio = data.get("allocation_ratio") or 1.0
            split = split_total(size["total"], allocation_weights(design, ratio, arms))
            if min(split) < 2:
                put_error(
                    errors,
                    ("sample_size", "total"),
                    f"splits into {split} by the allocation; every arm needs at least 2; "
                    f"got {size['total']}",
                )
        if design == "anova_oneway" and arms is not None and sim_data and "groups" in sim_data:
            if len(sim_data["groups"]) != arms:
                put_error(
                    errors,
                    ("simulation", "data", "groups"),
                    f"must list {arms} arms, one per group (effect.groups); "
                    f"got {len(sim_data['groups'])}",
                )
        raise_errors(errors)

    @staticmethod
    def _effect_rules(
        errors: dict, design: str, find: str | None, hyp: Mapping, e: Mapping
    ) -> None:
        """Rules that tie the effect to find and the hypothesis."""
        if find != "sample_size":
            return
        kind = hyp.get("kind", "superiority")
        margin = hyp.get("margin")
        if kind == "superiority":
            zero = {
                "two_means": ("difference", 0.0, "0"),
                "one_mean": ("difference", 0.0, "0"),
                "paired_mean": ("difference", 0.0, "0"),
                "two_proportions": ("p_treatment", e.get("p_control"), "p_control"),
                "correlation": ("r", e.get("r0", 0.0), "r0"),
                "rank_sum": ("prob_superiority", 0.5, "0.5"),
                "survival_logrank": ("hazard_ratio", 1.0, "1"),
                "anova_oneway": ("cohens_f", 0.0, "0"),
            }[design]
            name, null, label = zero
            value = e.get(name)
            if value is not None and null is not None and value == null:
                put_error(
                    errors,
                    ("effect", name),
                    f"must differ from {label} when solving for the sample size "
                    f"(no effect to detect); got {show(value)}",
                )
            return
        if margin is None or design not in MARGIN_DESIGNS:
            return
        if design == "two_means":
            name, diff = "difference", e.get("difference")
        else:
            # A proportion that failed its own check arrives as None (marshmallow keeps the
            # valid part of a failed block); it is reported there already.
            p_t, p_c = e.get("p_treatment"), e.get("p_control")
            name, diff = "p_treatment", None if p_t is None or p_c is None else p_t - p_c
        if diff is None:
            return
        shown = "difference" if design == "two_means" else "p_treatment - p_control"
        if kind == "noninferiority":
            better = hyp.get("higher_is_better", True)
            ok = diff > margin if better else diff < margin
            if not ok:
                side = "above" if better else "below"
                put_error(
                    errors,
                    ("effect", name),
                    f"{shown} must be {side} the noninferiority margin {number_text(margin)} when "
                    f"solving for the sample size; got {show(diff)}",
                )
        elif kind == "equivalence" and not abs(diff) < margin:
            put_error(
                errors,
                ("effect", name),
                f"{shown} must be inside (-{number_text(margin)}, {number_text(margin)}) when solving for "
                f"the sample size of an equivalence question; got {show(diff)}",
            )

    @post_load(pass_original=True)
    def _normalize(self, data: dict, original_data: Any, **kwargs: Any) -> dict:
        design, find = data["design"], data["find"]
        hyp = data.get("hypothesis") or shared(HypothesisSchema).load({})
        kind = hyp["kind"]
        effect = data.get("effect")
        sim = data.get("simulation")
        method = data.get("method")
        if effect is None:
            from_data = method == "simulation" and (sim or {}).get("data") is not None
            effect = EFFECT_SCHEMAS[design](
                find=find, from_data=from_data and find != "effect"
            ).load({})
        if method is None:
            only_model = (
                design == "rank_sum"
                and (effect or {}).get("prob_superiority") is None
                and sim is not None
                and sim.get("data") is not None
            )
            method = "simulation" if only_model else "analytic"
        if method == "simulation":
            sim = sim if sim is not None else shared(SimulationSchema, design=design).load({})
            if sim.get("test") is None:
                sim["test"] = TESTS[design][0]
        else:
            sim = None
        formula = data.get("formula")
        if formula is None:
            formula = FORMULAS[design][0]
            if design == "two_proportions" and kind != "superiority":
                formula = "farrington_manning"  # the score test is the default against a margin
            if design == "two_means" and effect.get("sd_control") != effect.get("sd_treatment"):
                formula = "welch"
        ratio = data.get("allocation_ratio")
        ratio = 1.0 if ratio is None else ratio
        sample_size = data.get("sample_size")
        if sample_size is not None:
            arms = arm_count(design, effect)
            if sample_size.get("per_arm") is not None:
                sample_size = {"per_arm": list(sample_size["per_arm"])}
            else:
                weights = allocation_weights(design, ratio, arms)
                sample_size = {"per_arm": split_total(sample_size["total"], weights)}
        sides = data.get("sides")
        if sides is None:
            sides = 2 if kind == "superiority" else 1
        if (
            kind == "superiority"
            and sides == 1
            and not posted(original_data.get("hypothesis"), "higher_is_better")
        ):
            # Unstated: the one-sided test looks where the effect points; the record says so.
            implied = _implied(design, method, (sim or {}).get("data"))
            aim = direction.one_sided({"hypothesis": hyp, "effect": effect}, design, implied)
            hyp = {**hyp, "higher_is_better": aim > 0}
        adjustments = data.get("adjustments") or shared(AdjustmentsSchema).load({})
        return {
            "design": design,
            "find": find,
            "alpha": default_alpha(kind) if data.get("alpha") is None else data["alpha"],
            "sides": sides,
            "target_power": None
            if find == "power"
            else (0.80 if data.get("target_power") is None else data["target_power"]),
            "sample_size": sample_size if find != "sample_size" else None,
            "allocation_ratio": ratio,
            "allocation_rounding": data.get("allocation_rounding") or "each_arm",
            "effect": effect,
            "hypothesis": hyp,
            "adjustments": adjustments,
            "method": method,
            "formula": formula,
            "simulation": sim,
        }


def _implied(design: str, method: str | None, data: Any) -> float | None:
    """The effect a posted simulation data model implies (direction.implied), or None."""
    if method != "simulation" or not isinstance(data, Mapping):
        return None
    keys = ("sample",) if design in ("one_mean", "paired_mean") else ("control", "treatment")
    try:
        arms = [check_arm(dict(data[k]), f"simulation.data.{k}") for k in keys]
        return direction.implied(design, arms)
    except (KeyError, TypeError, ValueError, ArithmeticError, QuestionError):
        return None  # an invalid data model is reported by its own checks


def _simple_ratio(ratio: float) -> bool:
    from service.engine.adjust import ratio_fraction

    return ratio_fraction(ratio) is not None


def default_alpha(kind: str) -> float:
    """The alpha used when none is posted: 0.05, or one-sided 0.025 for noninferiority and
    equivalence, the level regulatory guidance expects of such trials (ICH E9, 1998, 5.5)."""
    return 0.05 if kind == "superiority" else 0.025


# ---------------------------------------------------------------------------------------------
# Entry points


def flatten_errors(messages: Any, prefix: str = "") -> dict[str, list[str]]:
    """Turn marshmallow's nested error messages into ``{"dotted.path": [messages]}``."""
    out: dict[str, list[str]] = {}

    def walk(node: Any, path: str) -> None:
        if isinstance(node, Mapping):
            for key, sub in node.items():
                key = str(key)
                if key == "_schema":
                    walk(sub, path)
                else:
                    walk(sub, f"{path}.{key}" if path else key)
        elif isinstance(node, (list, tuple)):
            for item in node:
                if isinstance(item, (Mapping, list, tuple)):
                    walk(item, path)
                else:
                    out.setdefault(path or "question", []).append(str(item))
        else:
            out.setdefault(path or "question", []).append(str(node))

    walk(messages, prefix)
    return out


def load_question(raw: Any) -> dict:
    """Validate and normalize a posted question; raise ``QuestionInvalid`` on bad input."""
    if not isinstance(raw, Mapping):
        raise QuestionInvalid(
            {"question": [f"must be a JSON object with at least a design; {got(raw)}"]}
        )
    try:
        return shared(QuestionSchema).load(dict(raw))
    except ValidationError as exc:
        raise QuestionInvalid(flatten_errors(exc.messages)) from None


def register_openapi_types(plugin: Any) -> None:
    """Tell apispec's MarshmallowPlugin how the strict fields map to OpenAPI types."""
    plugin.map_to_openapi_type(Whole, "integer", None)
    plugin.map_to_openapi_type(Number, "number", None)
    plugin.map_to_openapi_type(Flag, "boolean", None)
    plugin.map_to_openapi_type(Choice, "string", None)
    plugin.map_to_openapi_type(Text, "string", None)
