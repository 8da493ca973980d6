"""Every class of bad input gets an error on the right dotted field that names the value and
what is allowed. The rules are the question contract in DEVELOPERS.md ("The question")."""

from __future__ import annotations

import copy
import math

import pytest

from service.schemas import QuestionInvalid, load_question
from tests.schemas.posted import SURV

BASE = {"design": "two_means", "effect": {"difference": 0.5, "sd": 1.0}}
SIM = {"method": "simulation", "simulation": {"replicates": 1000, "seed": 1}}
PROP = {"design": "two_proportions", "effect": {"p_control": 0.3, "p_treatment": 0.5}}
ANOVA = {"design": "anova_oneway", "effect": {"cohens_f": 0.25, "groups": 3}}
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
    ("sd-inf", merge(BASE, effect__sd=math.inf), "effect.sd", ["finite", "Infinity"]),
    ("power-one", merge(BASE, target_power=1.0), "target_power", ["(0, 1)", "got 1.0"]),
    (
        "power-below-alpha",
        merge(BASE, alpha=0.05, target_power=0.03),
        "target_power",
        ["(alpha, 1)", "0.05", "got 0.03"],
    ),
    (
        "power-with-find-power",
        merge(BASE, find="power", target_power=0.8, sample_size={"per_arm": [20, 20]}),
        "target_power",
        ["not used when find = power", "0.8"],
    ),
    ("p-above-one", merge(PROP, effect__p_control=1.2), "effect.p_control", ["(0, 1)", "got 1.2"]),
    ("p-zero", merge(PROP, effect__p_treatment=0), "effect.p_treatment", ["(0, 1)", "got 0"]),
    ("sd-zero", merge(BASE, effect__sd=0), "effect.sd", ["> 0", "got 0"]),
    ("sd-negative", merge(BASE, effect__sd=-2.0), "effect.sd", ["> 0", "got -2.0"]),
    (
        "sd-control-zero",
        merge(BASE, effect={"difference": 1.0, "sd_control": 0, "sd_treatment": 1}),
        "effect.sd_control",
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
        merge(BASE, hypothesis={"kind": "noninferiority", "margin": 0.1}),
        "hypothesis.margin",
        ["< 0", "higher_is_better is true", "got 0.1"],
    ),
    (
        "ni-margin-sign-lower",
        merge(
            BASE, hypothesis={"kind": "noninferiority", "margin": -0.1, "higher_is_better": False}
        ),
        "hypothesis.margin",
        ["> 0", "higher_is_better is false", "got -0.1"],
    ),
    (
        "ni-margin-missing",
        merge(BASE, hypothesis={"kind": "noninferiority"}),
        "hypothesis.margin",
        ["required", "< 0"],
    ),
    (
        "equivalence-margin",
        merge(BASE, hypothesis={"kind": "equivalence", "margin": -0.1}),
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
        "kind-unknown",
        merge(BASE, hypothesis={"kind": "superior"}),
        "hypothesis.kind",
        ["superiority, noninferiority, equivalence", '"superior"'],
    ),
    (
        "design-unknown",
        merge(BASE, design="t_test"),
        "design",
        ["two_means", "survival_logrank", '"t_test"'],
    ),
    (
        "design-missing",
        {"effect": {"difference": 1.0, "sd": 1.0}},
        "design",
        ["required", "two_means"],
    ),
    ("find-unknown", merge(BASE, find="n"), "find", ["sample_size, power, effect", '"n"']),
    (
        "test-not-for-design",
        merge(BASE, **SIM, simulation__test="logrank"),
        "simulation.test",
        ["student_t, welch_t, rank_sum", '"logrank"'],
    ),
    (
        "test-unknown",
        merge(PROP, **SIM, simulation__test="chi2"),
        "simulation.test",
        ["z_test, fisher_exact", '"chi2"'],
    ),
    (
        "formula-not-offered",
        merge(BASE, formula="arcsine"),
        "formula",
        ["student, welch", '"arcsine"'],
    ),
    (
        "formula-survival",
        merge(SURV, formula="welch"),
        "formula",
        ["schoenfeld, freedman", '"welch"'],
    ),
    (
        "missing-difference",
        merge(BASE, effect={"sd": 1.0}),
        "effect.difference",
        ["required", "number"],
    ),
    ("missing-sd", merge(BASE, effect={"difference": 1.0}), "effect.sd", ["required", "> 0"]),
    (
        "missing-sd-treatment",
        merge(BASE, effect={"difference": 1.0, "sd_control": 1.0}),
        "effect.sd_treatment",
        ["required", "> 0"],
    ),
    (
        "sd-and-sd-control",
        merge(BASE, effect__sd_control=2.0),
        "effect.sd_control",
        ["not both", "got 2.0"],
    ),
    (
        "power-without-n",
        merge(BASE, find="power"),
        "sample_size",
        ["required when find = power", "per_arm", "total"],
    ),
    (
        "effect-without-n",
        merge(BASE, find="effect", effect={"sd": 1.0}),
        "sample_size",
        ["required when find = effect"],
    ),
    (
        "n-with-find-n",
        merge(BASE, sample_size={"per_arm": [30, 30]}),
        "sample_size",
        ["absent when find = sample_size", "[30, 30]"],
    ),
    (
        "n-both-forms",
        merge(BASE, find="power", sample_size={"per_arm": [30, 30], "total": 60}),
        "sample_size.total",
        ["per_arm or total, not both"],
    ),
    (
        "per-arm-length",
        merge(BASE, find="power", sample_size={"per_arm": [30, 30, 30]}),
        "sample_size.per_arm",
        ["2 number(s), one per arm", "got 3"],
    ),
    (
        "per-arm-small",
        merge(BASE, find="power", sample_size={"per_arm": [1, 30]}),
        "sample_size.per_arm.0",
        ["[2, 1,000,000,000]", "got 1"],
    ),
    (
        "per-arm-fraction",
        merge(BASE, find="power", sample_size={"per_arm": [10.5, 30]}),
        "sample_size.per_arm.0",
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
        ["differ from p_control", "got 0.3"],
    ),
    (
        "difference-zero",
        merge(BASE, effect__difference=0),
        "effect.difference",
        ["differ from 0", "got 0"],
    ),
    (
        "r-equals-r0",
        {"design": "correlation", "effect": {"r": 0.2, "r0": 0.2}},
        "effect.r",
        ["differ from r0", "got 0.2"],
    ),
    (
        "prob-half",
        {"design": "rank_sum", "effect": {"prob_superiority": 0.5}},
        "effect.prob_superiority",
        ["differ from 0.5", "got 0.5"],
    ),
    ("anova-one-group", merge(ANOVA, effect__groups=1), "effect.groups", ["[2, 1,000]", "got 1"]),
    (
        "anova-one-mean",
        {"design": "anova_oneway", "effect": {"group_means": [1.0], "sd": 1.0}},
        "effect.group_means",
        ["at least 2", "[1.0]"],
    ),
    (
        "anova-groups-mismatch",
        {"design": "anova_oneway", "effect": {"group_means": [1.0, 2.0], "sd": 1.0, "groups": 3}},
        "effect.groups",
        ["number of group_means (2)", "got 3"],
    ),
    ("r-one", {"design": "correlation", "effect": {"r": 1.0}}, "effect.r", ["(-1, 1)", "got 1.0"]),
    (
        "r-below",
        {"design": "correlation", "effect": {"r": -1.5}},
        "effect.r",
        ["(-1, 1)", "got -1.5"],
    ),
    (
        "paired-rho-one",
        {"design": "paired_mean", "effect": {"difference": 1.0, "sd": 2.0, "correlation": 1.0}},
        "effect.correlation",
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
            effect={"sd": 1.0},
            sample_size={"per_arm": [30, 30]},
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
        "ni-on-anova",
        merge(ANOVA, hypothesis={"kind": "noninferiority", "margin": -0.1}),
        "hypothesis.kind",
        ["two_means, two_proportions", '"anova_oneway"'],
    ),
    (
        "equivalence-on-survival",
        merge(SURV, hypothesis={"kind": "equivalence", "margin": 0.1}),
        "hypothesis.kind",
        ["two_means, two_proportions", '"survival_logrank"'],
    ),
    (
        "ni-two-sided",
        merge(BASE, sides=2, hypothesis={"kind": "noninferiority", "margin": -0.6}),
        "sides",
        ["must be 1", "got 2"],
    ),
    ("sides-three", merge(BASE, sides=3), "sides", ["[1, 2]", "got 3"]),
    (
        "ni-effect-below-margin",
        merge(BASE, effect__difference=-0.2, hypothesis={"kind": "noninferiority", "margin": -0.1}),
        "effect.difference",
        ["above the noninferiority margin -0.1", "got -0.2"],
    ),
    (
        "equivalence-effect-outside",
        merge(PROP, hypothesis={"kind": "equivalence", "margin": 0.1}),
        "effect.p_treatment",
        ["inside (-0.1, 0.1)", "got 0.2"],
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
        "allocation-one-arm",
        {"design": "one_mean", "allocation_ratio": 2.0, "effect": {"difference": 1.0, "sd": 1.0}},
        "allocation_ratio",
        ["two-arm designs", "got 2.0"],
    ),
    (
        "rank-sum-neither",
        {"design": "rank_sum", "effect": {}},
        "effect.prob_superiority",
        ["required", "simulation.data", "neither"],
    ),
    (
        "rank-sum-analytic-with-model",
        {
            "design": "rank_sum",
            "method": "analytic",
            "simulation": {"data": two_arm_data(NORMAL, NORMAL)},
        },
        "effect.prob_superiority",
        ["required for method = analytic"],
    ),
    (
        "cc-not-bool",
        merge(PROP, effect__continuity_correction=1),
        "effect.continuity_correction",
        ["true or false", "got 1"],
    ),
    ("hypothesis-string", merge(BASE, hypothesis="ni"), "hypothesis", ["object", '"ni"', "string"]),
    ("effect-list", merge(BASE, effect=[0.5, 1.0]), "effect", ["object", "difference", "a list"]),
    (
        "survival-no-time",
        merge(SURV, effect__accrual_period=0, effect__follow_up=0),
        "effect.follow_up",
        ["> 0", "0 + 0"],
    ),
    (
        "survival-no-median",
        {
            "design": "survival_logrank",
            "effect": {"hazard_ratio": 0.7, "accrual_period": 12, "follow_up": 6},
        },
        "effect.median_control",
        ["required", "event_rate_control"],
    ),
    (
        "survival-loss-negative",
        merge(SURV, effect__loss_rate=-0.01),
        "effect.loss_rate",
        [">= 0", "got -0.01"],
    ),
    ("unknown-top", merge(BASE, colour="blue"), "colour", ["unknown field", "alpha", "design"]),
    (
        "unknown-effect",
        merge(BASE, effect__sigma=1.0),
        "effect.sigma",
        ["unknown field", "sd_control"],
    ),
    (
        "find-effect-with-solved",
        merge(BASE, find="effect", sample_size={"per_arm": [30, 30]}),
        "effect.difference",
        ["solved for when find = effect", "got 0.5"],
    ),
    # data models: shape per design, family per design, parameter ranges per family
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
        "data-shape-one-sample",
        {
            "design": "one_mean",
            **SIM,
            "effect": {"difference": 1, "sd": 1},
            "simulation": {"data": two_arm_data(NORMAL, NORMAL)},
        },
        "simulation.data.sample",
        ["required"],
    ),
    (
        "data-shape-extra-key",
        {
            "design": "one_mean",
            **SIM,
            "effect": {"difference": 1, "sd": 1},
            "simulation": {"data": two_arm_data(NORMAL, NORMAL)},
        },
        "simulation.data.control",
        ["unknown field", "sample"],
    ),
    (
        "data-groups-count",
        merge(ANOVA, **SIM, simulation__data={"groups": [NORMAL, NORMAL]}),
        "simulation.data.groups",
        ["3 arms", "got 2"],
    ),
    (
        "data-correlation",
        {
            "design": "correlation",
            "effect": {"r": 0.3},
            **SIM,
            "simulation": {"data": {"sample": NORMAL}},
        },
        "simulation.data",
        ["not offered for correlation"],
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
    raw = merge(BASE, alpha=2.0, effect__sd=-1.0, adjustments={"dropout": 1.5})
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert {"alpha", "effect.sd", "adjustments.dropout"} <= set(info.value.errors)


@pytest.mark.parametrize("raw", [None, [], "two_means", 3, True])
def test_non_object_question(raw) -> None:
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert list(info.value.errors) == ["question"]
    assert "JSON object" in info.value.errors["question"][0]


# Required effect fields per design when the block is posted empty (contract: effect fields).
REQUIRED = [
    ("two_means", {"difference", "sd"}),
    ("one_mean", {"difference", "sd"}),
    ("paired_mean", {"difference", "sd_difference"}),
    ("two_proportions", {"p_control", "p_treatment"}),
    ("anova_oneway", {"cohens_f", "groups"}),
    ("correlation", {"r"}),
    ("survival_logrank", {"hazard_ratio", "median_control", "accrual_period", "follow_up"}),
]


@pytest.mark.parametrize("design, names", REQUIRED)
@pytest.mark.parametrize("effect", [{}, None])
def test_required_effect_fields(design: str, names: set[str], effect) -> None:
    raw = {"design": design} if effect is None else {"design": design, "effect": effect}
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert {f"effect.{n}" for n in names} == set(info.value.errors)
    assert all("required" in m for msgs in info.value.errors.values() for m in msgs)


@pytest.mark.parametrize("missing", ["p_control", "p_treatment"])
def test_margin_rule_with_a_missing_proportion_names_the_proportion(missing):
    # A non-inferiority margin check needs both proportions; a missing one is reported on its
    # own field rather than crashing the margin rule (found by comparing 3,334 bad questions).
    effect = {"p_control": 0.2, "p_treatment": 0.25}
    del effect[missing]
    with pytest.raises(QuestionInvalid) as info:
        load_question(
            {
                "design": "two_proportions",
                "effect": effect,
                "hypothesis": {"kind": "noninferiority", "margin": -0.1},
            }
        )
    assert f"effect.{missing}" in info.value.errors
