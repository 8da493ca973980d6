"""Binary outcome, logistic regression (binary × regression): Hsieh, Bloch & Larsen (1998),
Stat Med 17:1623, recomputed with scipy, and the continuous-covariate formula against the
logistic model's own Fisher information (scipy quadrature) near an odds ratio of 1."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from service.engine import compute
from service.schemas import QuestionInvalid, load_question

Z = stats.norm.ppf


def logistic(**over) -> dict:
    body = {
        "outcome": "binary",
        "layout": "regression",
        "find": "sample_size",
        "effect": {"odds_ratio": 1.5},
        "assumptions": {"event_rate": 0.1},
    }
    body.update(over)
    return body


def answer(body: dict) -> dict:
    return compute(load_question(body))


def _raw(record: dict) -> float:
    return record["sample_size"]["steps"][0]["per_group_raw"][0]


@pytest.mark.parametrize(("p", "odds_ratio", "r2"), [(0.1, 1.5, 0.0), (0.3, 1.3, 0.25)])
def test_continuous_covariate_formula(p, odds_ratio, r2):
    # formula: Hsieh, Bloch & Larsen (1998), the formula for a normal covariate,
    # n = (z_{1−α/2} + z_{1−β})² / (P(1 − P)·(ln OR)²), divided by 1 − R² for other covariates.
    n = (Z(0.975) + Z(0.8)) ** 2 / (p * (1 - p) * math.log(odds_ratio) ** 2) / (1 - r2)
    record = answer(
        logistic(
            effect={"odds_ratio": odds_ratio},
            assumptions={"event_rate": p, "r2_covariates": r2},
        )
    )
    assert _raw(record) == pytest.approx(n, rel=1e-12)
    assert record["sample_size"]["total"] == math.ceil(n)
    assert record["power"]["estimate"] >= 0.8


def test_binary_covariate_formula():
    # formula: Hsieh, Bloch & Larsen (1998), the formula for a binary covariate (prevalence B):
    # n = [z_α·√(P(1−P)/B) + z_β·√(P₁(1−P₁) + P₂(1−P₂)(1−B)/B)]² / ((P₁ − P₂)²(1 − B)),
    # here P₁ = 0.2, OR 2 (P₂ = 1/3), B = 0.3, alpha 0.05 two-sided, power 0.9.
    p1, b = 0.2, 0.3
    p2 = 0.25 * 2 / (1 + 0.25 * 2)
    p = (1 - b) * p1 + b * p2
    n = (
        Z(0.975) * math.sqrt(p * (1 - p) / b)
        + Z(0.9) * math.sqrt(p1 * (1 - p1) + p2 * (1 - p2) * (1 - b) / b)
    ) ** 2 / ((p1 - p2) ** 2 * (1 - b))
    record = answer(
        logistic(
            effect={"odds_ratio": 2.0},
            assumptions={"reference_event_rate": p1, "covariate_prevalence": b},
            target_power=0.9,
        )
    )
    assert _raw(record) == pytest.approx(n, rel=1e-12)
    assert record["method"]["derived"]["event_rate_with_factor"] == pytest.approx(p2)
    assert record["method"]["derived"]["overall_event_rate"] == pytest.approx(p)


def test_continuous_covariate_against_the_logistic_fisher_information():
    # general-purpose library: the Wald variance of the slope of a logistic model with a
    # standard normal covariate, (I⁻¹)₂₂ with I = E[p(x)(1 − p(x))·(1, x)(1, x)ᵀ] by scipy
    # quadrature; near OR = 1 it tends to 1/(P(1 − P)), the formula's variance.
    p, odds_ratio = 0.2, 1.1
    beta = math.log(odds_ratio)
    alpha0 = math.log(p / (1 - p))

    def moment(k: int) -> float:
        def f(x):
            e = 1.0 / (1.0 + math.exp(-(alpha0 + beta * x)))
            return e * (1 - e) * x**k * stats.norm.pdf(x)

        return integrate.quad(f, -12, 12)[0]

    info = np.array([[moment(0), moment(1)], [moment(1), moment(2)]])
    var = np.linalg.inv(info)[1, 1]
    n_exact = (Z(0.975) + Z(0.8)) ** 2 * var / beta**2
    record = answer(logistic(effect={"odds_ratio": odds_ratio}, assumptions={"event_rate": p}))
    assert _raw(record) == pytest.approx(n_exact, rel=0.02)


def test_power_and_effect_invert_the_sample_size():
    record = answer(logistic(find="power", sample_size={"per_group": [531]}))
    assert record["power"]["estimate"] == pytest.approx(0.8, abs=0.002)
    solved = answer(
        logistic(find="effect", effect={}, sample_size={"per_group": [531]}, target_power=0.8)
    )
    assert solved["effect"]["value"] == pytest.approx(1.5, abs=0.002)
    binary = answer(
        logistic(
            find="effect",
            effect={},
            assumptions={"reference_event_rate": 0.2, "covariate_prevalence": 0.3},
            sample_size={"per_group": [300]},
        )
    )
    check = answer(
        logistic(
            find="power",
            effect={"odds_ratio": binary["effect"]["value"]},
            assumptions={"reference_event_rate": 0.2, "covariate_prevalence": 0.3},
            sample_size={"per_group": [300]},
        )
    )
    assert check["power"]["estimate"] == pytest.approx(0.8, abs=1e-6)


def test_bad_input_is_refused_naming_the_field():
    with pytest.raises(QuestionInvalid) as e:
        load_question(logistic(effect={"odds_ratio": 1.0}))
    assert "effect.odds_ratio" in e.value.errors
    with pytest.raises(QuestionInvalid) as e:
        load_question(logistic(assumptions={"reference_event_rate": 0.2}))
    assert "assumptions.covariate_prevalence" in e.value.errors


@pytest.mark.parametrize(
    ("n", "effect", "assumptions"),
    [
        (543, {"odds_ratio": 1.3}, {"event_rate": 0.3}),
        (300, {"odds_ratio": 2.0}, {"reference_event_rate": 0.2, "covariate_prevalence": 0.3}),
    ],
)
def test_simulated_wald_power_agrees_with_the_formula(n, effect, assumptions):
    # The logistic model fitted by Newton–Raphson in every replicate, its Wald test against the
    # formula's power (near an odds ratio of 1, and for a binary covariate, where the formula's
    # normal approximation holds well).
    record = answer(
        logistic(
            find="power",
            sample_size={"per_group": [n]},
            effect=effect,
            assumptions=assumptions,
            method="simulation",
            simulation={"replicates": 4000, "seed": 20261202},
        )
    )
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) < 4 * power["mcse"]
    assert record["type_i_error"]["verdict"] != "exceeds"
    assert record["method"]["data"]["regression"]["family"] == "logistic_regression"
