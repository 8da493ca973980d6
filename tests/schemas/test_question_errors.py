"""Every class of bad input gets an error on the right dotted field that names the value and
what is allowed. The rules are the question contract in DEVELOPERS.md ("The question")."""

from __future__ import annotations

import copy
import math

import pytest

from service.schemas import QuestionInvalid, load_question
from tests.posted import SURV

BASE = {
    "outcome": "continuous",
    "layout": "two_groups",
    "effect": {"difference": 0.5},
    "assumptions": {"sd": 1.0},
}
SIM = {"method": "simulation", "simulation": {"replicates": 1000, "seed": 1}}
PROP = {
    "outcome": "binary",
    "layout": "two_groups",
    "effect": {"p_treatment": 0.5},
    "assumptions": {"p_control": 0.3},
}
ANOVA = {
    "outcome": "continuous",
    "layout": "k_groups",
    "effect": {"cohens_f": 0.25},
    "assumptions": {"group_count": 3},
}
SINGLE = {"outcome": "continuous", "layout": "single_group"}
CORR = {"outcome": "association", "layout": "single_group"}
RANKS = {"outcome": "ordinal", "layout": "two_groups"}
NORMAL = {"family": "normal", "mean": 0.0, "sd": 1.0}


def merge(base: dict, **changes) -> dict:
    """Deep-merge ``changes`` into a copy of ``base``; dotted keys reach into nested blocks."""
    out = copy.deepcopy(base)
    for dotted, value in changes.items():
        node = out
        *parents, last = dotted.split("__")
        for key in parents:
            node = node.setdefault(key, {})
        node[last] = copy.deepcopy(value)
    return out


def two_arm_data(control: dict, treatment: dict) -> dict:
    return {"control": control, "treatment": treatment}


# (id, question, field path, substrings the message must contain: the allowed range and the value)
CASES = [
    ("alpha-high", merge(BASE, alpha=1.5), "alpha", ["(0, 0.5]", "got 1.5"]),
    ("alpha-zero", merge(BASE, alpha=0), "alpha", ["(0, 0.5]", "got 0"]),
    ("alpha-string", merge(BASE, alpha="0.05"), "alpha", ["(0, 0.5]", '"0.05"', "string"]),
    ("alpha-bool", merge(BASE, alpha=True), "alpha", ["(0, 0.5]", "true", "boolean"]),
    ("alpha-nan", merge(BASE, alpha=math.nan), "alpha", ["finite", "NaN"]),
    ("sd-inf", merge(BASE, assumptions__sd=math.inf), "assumptions.sd", ["finite", "Infinity"]),
    ("power-one", merge(BASE, target_power=1.0), "target_power", ["(0, 1)", "got 1.0"]),
    (
        "power-below-alpha",
        merge(BASE, alpha=0.05, target_power=0.03),
        "target_power",
        ["(alpha, 1)", "0.05", "got 0.03"],
    ),
    (
        "power-with-find-power",
        merge(BASE, find="power", target_power=0.8, sample_size={"per_group": [20, 20]}),
        "target_power",
        ["not used when find = power", "0.8"],
    ),
    (
        "p-above-one",
        merge(PROP, assumptions__p_control=1.2),
        "assumptions.p_control",
        ["(0, 1)", "got 1.2"],
    ),
    ("p-zero", merge(PROP, effect__p_treatment=0), "effect.p_treatment", ["(0, 1)", "got 0"]),
    ("sd-zero", merge(BASE, assumptions__sd=0), "assumptions.sd", ["> 0", "got 0"]),
    ("sd-negative", merge(BASE, assumptions__sd=-2.0), "assumptions.sd", ["> 0", "got -2.0"]),
    (
        "sd-control-zero",
        merge(BASE, assumptions={"sd_control": 0, "sd_treatment": 1}),
        "assumptions.sd_control",
        ["> 0", "got 0"],
    ),
    (
        "difference-string",
        merge(BASE, effect__difference="0.5"),
        "effect.difference",
        ['"0.5"', "string", "number"],
    ),
    (
        "hr-negative",
        merge(SURV, effect__hazard_ratio=-0.5),
        "effect.hazard_ratio",
        ["> 0", "got -0.5"],
    ),
    (
        "hr-one-solve-n",
        merge(SURV, effect__hazard_ratio=1.0),
        "effect.hazard_ratio",
        ["differ from 1", "got 1.0"],
    ),
    (
        "ni-margin-sign",
        merge(BASE, hypothesis={"aim": "noninferiority", "margin": 0.1}),
        "hypothesis.margin",
        ["< 0", "higher_is_better is true", "got 0.1"],
    ),
    (
        "ni-margin-sign-lower",
        merge(
            BASE, hypothesis={"aim": "noninferiority", "margin": -0.1, "higher_is_better": False}
        ),
        "hypothesis.margin",
        ["> 0", "higher_is_better is false", "got -0.1"],
    ),
    (
        "ni-margin-missing",
        merge(BASE, hypothesis={"aim": "noninferiority"}),
        "hypothesis.margin",
        ["required", "< 0"],
    ),
    (
        "equivalence-margin",
        merge(BASE, hypothesis={"aim": "equivalence", "margin": -0.1}),
        "hypothesis.margin",
        ["> 0", "got -0.1"],
    ),
    (
        "superiority-margin",
        merge(BASE, hypothesis={"margin": 0.1}),
        "hypothesis.margin",
        ["noninferiority or equivalence", "got 0.1"],
    ),
    (
        "aim-unknown",
        merge(BASE, hypothesis={"aim": "superior"}),
        "hypothesis.aim",
        ["superiority, noninferiority, equivalence", '"superior"'],
    ),
    (
        "outcome-unknown",
        merge(BASE, outcome="t_test"),
        "outcome",
        ["continuous, binary", '"continuous × two_groups"', '"t_test"'],
    ),
    (
        "layout-unknown",
        merge(BASE, layout="stepped_wedge"),
        "layout",
        ["two_groups, paired", '"time_to_event × two_groups"', '"stepped_wedge"'],
    ),
    (
        "cell-unknown",
        merge(BASE, outcome="association"),
        "layout",
        ["association × two_groups is not a cell", '"association × single_group"'],
    ),
    (
        "outcome-missing",
        {"layout": "two_groups", "effect": {"difference": 1.0}},
        "outcome",
        ["required"],
    ),
    ("find-unknown", merge(BASE, find="n"), "find", ["sample_size, power, effect", '"n"']),
    (
        "analysis-not-for-cell",
        merge(BASE, **SIM, analysis="logrank"),
        "analysis",
        ["pooled_t, welch_t, rank_sum", '"logrank"'],
    ),
    (
        "analysis-unknown",
        merge(PROP, **SIM, analysis="chi2"),
        "analysis",
        [
            "pooled_z, unpooled_z, arcsine, score, mn_score, mn_score_enumerated, mn_score_unconditional, fisher_exact",
            '"chi2"',
        ],
    ),
    (
        "analysis-not-by-the-method",
        merge(PROP, analysis="fisher_exact", method="analytic"),
        "analysis",
        ["analytic", "pooled_z, unpooled_z, arcsine, score", '"fisher_exact"'],
    ),
    (
        "analysis-not-for-the-aim",
        merge(
            PROP,
            analysis="pooled_z",
            effect__p_treatment=0.3,
            hypothesis={"aim": "noninferiority", "margin": -0.1},
        ),
        "analysis",
        ["superiority only", "unpooled_z, score", '"pooled_z"'],
    ),
    (
        "events-formula-survival",
        merge(SURV, analysis_options={"events_formula": "welch"}),
        "analysis_options.events_formula",
        ["schoenfeld, freedman", '"welch"'],
    ),
    (
        "missing-difference",
        merge(BASE, effect={}),
        "effect.difference",
        ["required", "number"],
    ),
    (
        "missing-sd",
        merge(BASE, assumptions={}),
        "assumptions.sd",
        ["required", "> 0", "sd_control + sd_treatment"],
    ),
    (
        "missing-sd-treatment",
        merge(BASE, assumptions={"sd_control": 1.0}),
        "assumptions.sd_treatment",
        ["required", "> 0"],
    ),
    (
        "sd-and-sd-control",
        merge(BASE, assumptions__sd_control=2.0),
        "assumptions.sd_control",
        ["sd or sd_control + sd_treatment", "not a mix"],
    ),
    (
        "power-without-n",
        merge(BASE, find="power"),
        "sample_size",
        ["required when find = power", "per_group", "total"],
    ),
    (
        "effect-without-n",
        merge(BASE, find="effect", effect={}),
        "sample_size",
        ["required when find = effect"],
    ),
    (
        "n-with-find-n",
        merge(BASE, sample_size={"per_group": [30, 30]}),
        "sample_size",
        ["absent when find = sample_size", "[30, 30]"],
    ),
    (
        "n-both-forms",
        merge(BASE, find="power", sample_size={"per_group": [30, 30], "total": 60}),
        "sample_size.total",
        ["per_group or total, not both"],
    ),
    (
        "per-group-length",
        merge(BASE, find="power", sample_size={"per_group": [30, 30, 30]}),
        "sample_size.per_group",
        ["2 number(s), one per group", "got 3"],
    ),
    (
        "per-group-small",
        merge(BASE, find="power", sample_size={"per_group": [1, 30]}),
        "sample_size.per_group.0",
        ["[2, 1,000,000,000]", "got 1"],
    ),
    (
        "per-group-fraction",
        merge(BASE, find="power", sample_size={"per_group": [10.5, 30]}),
        "sample_size.per_group.0",
        ["whole number", "got 10.5"],
    ),
    (
        "total-splits-too-small",
        merge(BASE, find="power", allocation_ratio=10.0, sample_size={"total": 5}),
        "sample_size.total",
        ["at least 2", "got 5"],
    ),
    (
        "p-equal-solve-n",
        merge(PROP, effect__p_treatment=0.3),
        "effect.p_treatment",
        ["differ from 0.3 (the null value)", "got 0.3"],
    ),
    (
        "difference-zero",
        merge(BASE, effect__difference=0),
        "effect.difference",
        ["differ from 0 (the null value)", "got 0"],
    ),
    (
        "r-equals-r-null",
        {**CORR, "effect": {"r": 0.2}, "assumptions": {"r_null": 0.2}},
        "effect.r",
        ["differ from 0.2 (the null value)", "got 0.2"],
    ),
    (
        "prob-half",
        {**RANKS, "effect": {"prob_superiority": 0.5}},
        "effect.prob_superiority",
        ["differ from 0.5 (the null value)", "got 0.5"],
    ),
    (
        "k-groups-one-group",
        merge(ANOVA, assumptions__group_count=1),
        "assumptions.group_count",
        ["[2, 1,000]", "got 1"],
    ),
    (
        "k-groups-one-mean",
        {
            "outcome": "continuous",
            "layout": "k_groups",
            "effect": {"group_means": [1.0]},
            "assumptions": {"sd": 1.0},
        },
        "effect.group_means",
        ["at least 2", "[1.0]"],
    ),
    (
        "k-groups-means-and-count",
        {
            "outcome": "continuous",
            "layout": "k_groups",
            "effect": {"group_means": [1.0, 2.0]},
            "assumptions": {"sd": 1.0, "group_count": 3},
        },
        "assumptions.group_count",
        ["group_means + sd or group_count"],
    ),
    ("r-one", {**CORR, "effect": {"r": 1.0}}, "effect.r", ["(-1, 1)", "got 1.0"]),
    ("r-below", {**CORR, "effect": {"r": -1.5}}, "effect.r", ["(-1, 1)", "got -1.5"]),
    (
        "paired-correlation-one",
        {
            "outcome": "continuous",
            "layout": "paired",
            "effect": {"difference": 1.0},
            "assumptions": {"sd": 2.0, "correlation": 1.0},
        },
        "assumptions.correlation",
        ["(-1, 1)", "got 1.0"],
    ),
    (
        "dropout-one",
        merge(BASE, adjustments={"dropout": 1.0}),
        "adjustments.dropout",
        ["[0, 1)", "got 1.0"],
    ),
    (
        "dropout-negative",
        merge(BASE, adjustments={"dropout": -0.1}),
        "adjustments.dropout",
        ["[0, 1)", "got -0.1"],
    ),
    (
        "icc-one",
        merge(BASE, adjustments={"cluster": {"mean_size": 20, "icc": 1.0}}),
        "adjustments.cluster.icc",
        ["[0, 1)", "got 1.0"],
    ),
    (
        "cluster-size",
        merge(BASE, adjustments={"cluster": {"mean_size": 0.5, "icc": 0.05}}),
        "adjustments.cluster.mean_size",
        [">= 1", "got 0.5"],
    ),
    (
        "cluster-not-object",
        merge(BASE, adjustments={"cluster": 20}),
        "adjustments.cluster",
        ["object", "mean_size, icc", "got 20"],
    ),
    (
        "comparisons-zero",
        merge(BASE, adjustments={"comparisons": 0}),
        "adjustments.comparisons",
        ["[1, 10,000]", "got 0"],
    ),
    (
        "comparisons-fraction",
        merge(BASE, adjustments={"comparisons": 2.5}),
        "adjustments.comparisons",
        ["whole number", "got 2.5"],
    ),
    (
        "replicates-low",
        merge(BASE, **SIM, simulation__replicates=100),
        "simulation.replicates",
        ["[200, 2,000,000]", "got 100"],
    ),
    (
        "replicates-high",
        merge(BASE, **SIM, simulation__replicates=3_000_000),
        "simulation.replicates",
        ["[200, 2,000,000]", "got 3000000"],
    ),
    (
        "seed-negative",
        merge(BASE, **SIM, simulation__seed=-1),
        "simulation.seed",
        ["[0, 2**53)", "got -1"],
    ),
    (
        "seed-too-big",
        merge(BASE, **SIM, simulation__seed=2**53),
        "simulation.seed",
        ["[0, 2**53)", "got 9007199254740992"],
    ),
    (
        "chunk-size",
        merge(BASE, **SIM, simulation__chunk_size=10),
        "simulation.chunk_size",
        ["[100, 100,000]", "got 10"],
    ),
    (
        # A simulated effect search moves one effect field; a posted data model has none.
        "find-effect-simulation-data",
        merge(
            BASE,
            **SIM,
            find="effect",
            effect={},
            sample_size={"per_group": [30, 30]},
            simulation__data=two_arm_data(NORMAL, NORMAL),
        ),
        "simulation.data",
        ["not accepted for find = effect", "no single effect parameter", "control, treatment"],
    ),
    (
        "simulation-but-analytic",
        merge(BASE, simulation={"replicates": 1000}),
        "simulation",
        ["method is analytic"],
    ),
    (
        "ni-on-k-groups",
        merge(ANOVA, hypothesis={"aim": "noninferiority", "margin": -0.1}),
        "hypothesis.aim",
        ['"continuous × two_groups"', '"binary × two_groups"', '"continuous × k_groups"'],
    ),
    (
        "equivalence-on-survival",
        merge(SURV, hypothesis={"aim": "equivalence", "margin": 0.1}),
        "hypothesis.aim",
        ['"continuous × two_groups"', '"time_to_event × two_groups"'],
    ),
    (
        "ni-two-sided",
        merge(BASE, alternative="two-sided", hypothesis={"aim": "noninferiority", "margin": -0.6}),
        "alternative",
        ['must be "one-sided"', "two-sided"],
    ),
    (
        "one-sided-k-groups",
        merge(ANOVA, alternative="one-sided"),
        "alternative",
        ['must be "two-sided" for continuous × k_groups', "no direction", "one-sided"],
    ),
    (
        "alternative-unknown",
        merge(BASE, alternative="greater"),
        "alternative",
        ["two-sided, one-sided", '"greater"'],
    ),
    (
        "ni-effect-below-margin",
        merge(BASE, effect__difference=-0.2, hypothesis={"aim": "noninferiority", "margin": -0.1}),
        "effect.difference",
        ["above the noninferiority margin -0.1", "got -0.2"],
    ),
    (
        "equivalence-effect-outside",
        merge(PROP, hypothesis={"aim": "equivalence", "margin": 0.1}),
        "effect.p_treatment",
        ["the assumed effect (0.2) must be inside (-0.1, 0.1)", "got 0.5"],
    ),
    (
        "allocation-zero",
        merge(BASE, allocation_ratio=0),
        "allocation_ratio",
        ["(0, 1,000]", "got 0"],
    ),
    (
        "allocation-negative",
        merge(BASE, allocation_ratio=-1.0),
        "allocation_ratio",
        ["(0, 1,000]", "got -1.0"],
    ),
    (
        "allocation-one-group",
        {
            **SINGLE,
            "allocation_ratio": 2.0,
            "effect": {"difference": 1.0},
            "assumptions": {"sd": 1.0},
        },
        "allocation_ratio",
        ["two-group layouts", "got 2.0"],
    ),
    (
        "ranks-neither",
        {**RANKS, "effect": {}},
        "effect.prob_superiority",
        ["required", "(0, 1)"],
    ),
    (
        "ranks-analytic-with-model",
        {
            **RANKS,
            "method": "analytic",
            "simulation": {"data": two_arm_data(NORMAL, NORMAL)},
        },
        "effect.prob_superiority",
        ["is required", "(0, 1)"],
    ),
    (
        "cc-not-bool",
        merge(PROP, analysis_options={"continuity_correction": 1}),
        "analysis_options.continuity_correction",
        ["true or false", "got 1"],
    ),
    ("hypothesis-string", merge(BASE, hypothesis="ni"), "hypothesis", ["object", '"ni"', "string"]),
    ("effect-list", merge(BASE, effect=[0.5, 1.0]), "effect", ["object", "difference", "a list"]),
    (
        "field-in-the-wrong-block",
        merge(BASE, effect={"difference": 0.5, "sd": 1.0}, assumptions=None),
        "effect.sd",
        ["unknown field", "belongs in assumptions"],
    ),
    (
        "survival-no-time",
        merge(SURV, assumptions__accrual=0, assumptions__follow_up=0),
        "assumptions.follow_up",
        ["accrual + follow_up"],
    ),
    (
        "survival-no-median",
        merge(SURV, assumptions={"time_unit": "months", "accrual": 12, "follow_up": 6}),
        "assumptions.control_median",
        ["required", "control_hazard"],
    ),
    (
        "survival-no-time-unit",
        merge(SURV, assumptions={"control_median": 12.0, "accrual": 12, "follow_up": 6}),
        "assumptions.time_unit",
        ["required", "days, weeks, months, years"],
    ),
    (
        "survival-loss-negative",
        merge(SURV, assumptions__loss_hazard=-0.01),
        "assumptions.loss_hazard",
        [">= 0", "got -0.01"],
    ),
    ("unknown-top", merge(BASE, colour="blue"), "colour", ["unknown field", "alpha", "outcome"]),
    (
        "unknown-effect",
        merge(BASE, assumptions__sigma=1.0),
        "assumptions.sigma",
        ["unknown field", "sd_control"],
    ),
    (
        "find-effect-with-solved",
        merge(BASE, find="effect", sample_size={"per_group": [30, 30]}),
        "effect.difference",
        ["solved for when find = effect", "got 0.5"],
    ),
    # data models: shape per cell, family per outcome, parameter ranges per family
    (
        "data-bernoulli-for-means",
        merge(
            BASE, **SIM, simulation__data=two_arm_data(NORMAL, {"family": "bernoulli", "p": 0.5})
        ),
        "simulation.data.treatment.family",
        ["normal", "weibull", '"bernoulli"'],
    ),
    (
        "data-normal-for-proportions",
        merge(PROP, **SIM, simulation__data=two_arm_data(NORMAL, NORMAL)),
        "simulation.data.control.family",
        ["bernoulli", '"normal"'],
    ),
    (
        "data-normal-for-survival",
        merge(
            SURV,
            **SIM,
            simulation__data=two_arm_data(NORMAL, {"family": "exponential", "scale": 10.0}),
        ),
        "simulation.data.control.family",
        ["weibull, exponential", '"normal"'],
    ),
    (
        "data-sd",
        merge(
            BASE,
            **SIM,
            simulation__data=two_arm_data(NORMAL, {"family": "normal", "mean": 0.5, "sd": -1}),
        ),
        "simulation.data.treatment.sd",
        ["> 0", "got -1"],
    ),
    (
        "data-missing-param",
        merge(
            BASE, **SIM, simulation__data=two_arm_data(NORMAL, {"family": "normal", "mean": 0.5})
        ),
        "simulation.data.treatment.sd",
        ["required", "> 0"],
    ),
    (
        "data-contamination",
        merge(
            BASE,
            **SIM,
            simulation__data=two_arm_data(
                NORMAL,
                {
                    "family": "contaminated_normal",
                    "mean": 0,
                    "sd": 1,
                    "contamination": 1.0,
                    "sd_factor": 3,
                },
            ),
        ),
        "simulation.data.treatment.contamination",
        ["[0, 1)", "got 1.0"],
    ),
    (
        "data-sd-factor",
        merge(
            BASE,
            **SIM,
            simulation__data=two_arm_data(
                NORMAL,
                {
                    "family": "contaminated_normal",
                    "mean": 0,
                    "sd": 1,
                    "contamination": 0.1,
                    "sd_factor": 0.5,
                },
            ),
        ),
        "simulation.data.treatment.sd_factor",
        [">= 1", "got 0.5"],
    ),
    (
        "data-uniform-order",
        merge(
            BASE,
            **SIM,
            simulation__data=two_arm_data(NORMAL, {"family": "uniform", "low": 2.0, "high": 1.0}),
        ),
        "simulation.data.treatment.high",
        ["> low (2)", "got 1.0"],
    ),
    (
        "data-df",
        merge(
            BASE,
            **SIM,
            simulation__data=two_arm_data(
                NORMAL, {"family": "student_t", "df": 0, "loc": 0, "scale": 1}
            ),
        ),
        "simulation.data.treatment.df",
        ["> 0", "got 0"],
    ),
    (
        "data-dispersion",
        merge(
            BASE,
            **SIM,
            simulation__data=two_arm_data(
                NORMAL, {"family": "negative_binomial", "mean": 3, "dispersion": 0}
            ),
        ),
        "simulation.data.treatment.dispersion",
        ["> 0", "got 0"],
    ),
    (
        "data-weibull-shape",
        merge(
            SURV,
            **SIM,
            simulation__data=two_arm_data(
                {"family": "weibull", "shape": 0, "scale": 10},
                {"family": "exponential", "scale": 14},
            ),
        ),
        "simulation.data.control.shape",
        ["> 0", "got 0"],
    ),
    (
        "data-shape-one-group",
        {
            **SINGLE,
            **SIM,
            "effect": {"difference": 1},
            "assumptions": {"sd": 1},
            "simulation": {"data": two_arm_data(NORMAL, NORMAL)},
        },
        "simulation.data.group",
        ["required"],
    ),
    (
        "data-shape-extra-key",
        {
            **SINGLE,
            **SIM,
            "effect": {"difference": 1},
            "assumptions": {"sd": 1},
            "simulation": {"data": two_arm_data(NORMAL, NORMAL)},
        },
        "simulation.data.control",
        ["unknown field", "group"],
    ),
    (
        "data-shape-paired",
        {
            "outcome": "continuous",
            "layout": "paired",
            **SIM,
            "effect": {"difference": 1},
            "assumptions": {"sd_difference": 1},
            "simulation": {"data": {"group": NORMAL}},
        },
        "simulation.data.differences",
        ["required"],
    ),
    (
        "data-groups-count",
        merge(ANOVA, **SIM, simulation__data={"groups": [NORMAL, NORMAL]}),
        "simulation.data.groups",
        ["3 distributions", "got 2"],
    ),
    (
        "data-association",
        {**CORR, "effect": {"r": 0.3}, **SIM, "simulation": {"data": {"group": NORMAL}}},
        "simulation.data",
        ["not offered for association × single_group"],
    ),
    (
        "family-unknown",
        merge(BASE, **SIM, simulation__data=two_arm_data(NORMAL, {"family": "laplace", "loc": 0})),
        "simulation.data.treatment.family",
        ["normal, lognormal", '"laplace"'],
    ),
]


@pytest.mark.parametrize("raw, path, needles", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_names_field_value_and_range(raw: dict, path: str, needles: list[str]) -> None:
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    errors = info.value.errors
    assert path in errors, f"expected an error on {path}; got {errors}"
    text = " | ".join(errors[path])
    for needle in needles:
        assert needle in text, f"{needle!r} not in {text!r}"


def test_alpha_message_is_exactly_the_documented_one() -> None:
    # the example message of the contract (STYLE.md, problem+json errors)
    with pytest.raises(QuestionInvalid) as info:
        load_question(merge(BASE, alpha=1.5))
    assert info.value.errors == {"alpha": ["must be in (0, 0.5]; got 1.5"]}


def test_several_errors_are_reported_together() -> None:
    raw = merge(BASE, alpha=2.0, assumptions__sd=-1.0, adjustments={"dropout": 1.5})
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert {"alpha", "assumptions.sd", "adjustments.dropout"} <= set(info.value.errors)


@pytest.mark.parametrize("raw", [None, [], "two_groups", 3, True])
def test_non_object_question(raw) -> None:
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert list(info.value.errors) == ["question"]
    assert "JSON object" in info.value.errors["question"][0]


# Required fields per cell when its blocks are posted empty (VOCAB §3).
REQUIRED = [
    (("continuous", "two_groups"), {"effect.difference", "assumptions.sd"}),
    (("continuous", "single_group"), {"effect.difference", "assumptions.sd"}),
    (("continuous", "paired"), {"effect.difference", "assumptions.sd_difference"}),
    (("binary", "two_groups"), {"assumptions.p_control", "effect.p_treatment"}),
    (("continuous", "k_groups"), {"effect.group_means", "assumptions.sd"}),
    (("association", "single_group"), {"effect.r"}),
    (("ordinal", "two_groups"), {"effect.prob_superiority"}),
    (
        ("time_to_event", "two_groups"),
        {
            "effect.hazard_ratio",
            "assumptions.time_unit",
            "assumptions.control_median",
            "assumptions.accrual",
            "assumptions.follow_up",
        },
    ),
]


@pytest.mark.parametrize("cell, paths", REQUIRED, ids=[" x ".join(c) for c, _ in REQUIRED])
@pytest.mark.parametrize("blocks", [{}, None])
def test_required_fields(cell: tuple[str, str], paths: set[str], blocks) -> None:
    raw: dict = {"outcome": cell[0], "layout": cell[1]}
    if blocks is not None:
        raw.update(effect=blocks, assumptions=blocks)
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert paths == set(info.value.errors)
    # every message says what is allowed after "is required"
    assert all(m.startswith("is required: ") for msgs in info.value.errors.values() for m in msgs)


@pytest.mark.parametrize("missing", ["assumptions.p_control", "effect.p_treatment"])
def test_margin_rule_with_a_missing_proportion_names_the_proportion(missing):
    # A non-inferiority margin check needs both proportions; a missing one is reported on its
    # own field rather than crashing the margin rule (found by comparing 3,334 bad questions).
    raw = {
        "outcome": "binary",
        "layout": "two_groups",
        "effect": {"p_treatment": 0.25},
        "assumptions": {"p_control": 0.2},
        "hypothesis": {"aim": "noninferiority", "margin": -0.1},
    }
    block, name = missing.split(".")
    del raw[block][name]
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert missing in info.value.errors


@pytest.mark.parametrize("options", [5, "ratio", [1, 2], True])
def test_a_block_that_is_not_an_object_is_a_field_error_under_any_aim(options):
    # The noninferiority margin rule reads analysis_options.scale; a non-object there once
    # raised AttributeError (found by the property test) instead of naming the field.
    raw = merge(PROP, alpha=0.025)
    raw["hypothesis"] = {"aim": "noninferiority", "margin": -0.1}
    raw["alternative"] = "one-sided"
    raw["analysis_options"] = options
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert info.value.messages["analysis_options"][0].startswith("must be an object with keys")


def test_a_cell_without_options_says_to_remove_the_block():
    with pytest.raises(QuestionInvalid) as info:
        load_question(merge(BASE, analysis_options=5))
    (message,) = info.value.messages["analysis_options"]
    assert message.startswith("takes no keys for continuous × two_groups: remove it")
