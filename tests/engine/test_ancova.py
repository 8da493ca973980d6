"""ANCOVA on a baseline measurement (continuous × two_groups, analysis ancova): the design factor
1 − ρ² with its small-sample terms, the vectorized least-squares fit against statsmodels OLS, and
simulated power against the analytic power within 4 MCSE."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.stats.power import TTestIndPower

from service.engine import compute, vectests
from service.engine.chunks import ChunkTask, Streams
from service.engine.errors import QuestionError
from service.engine.kernels import ancova_data
from service.schemas import load_question


def ancova(rho=0.5, difference=0.5, **over) -> dict:
    body = {
        "outcome": "continuous",
        "layout": "two_groups",
        "analysis": "ancova",
        "find": "sample_size",
        "effect": {"difference": difference},
        "assumptions": {"sd": 1.0, "baseline_correlation": rho},
    }
    body.update(over)
    return body


def raw_n(body: dict) -> float:
    return compute(load_question(body))["sample_size"]["steps"][0]["per_group_raw"][0]


@pytest.mark.parametrize("rho", [0.3, 0.5, 0.7])
def test_design_factor_one_minus_rho_squared(rho):
    # formula: Borm, Fransen & Lemmens (2007), J Clin Epidemiol 60:1234: n_ANCOVA ≈ (1 − ρ²)·n_t;
    # d = 0.2, two-sided .05, power .80: n_t = 393.41 per group (Cohen 1988, Table 2.4.1: 393).
    n_t = TTestIndPower().solve_power(effect_size=0.2, alpha=0.05, power=0.8)
    n = raw_n(ancova(rho, 0.2))
    # the small-sample terms (one df for the slope, its sampling error) add under one subject
    assert (1 - rho**2) * n_t < n < (1 - rho**2) * n_t + 1.0


def test_small_sample_terms_at_rho_zero():
    # formula: at ρ = 0 the adjusted analysis can only lose: one df and the slope's variance
    # inflation 1 + 1/(N − 4) (E[χ²₁/χ²_{N−2}] = 1/(N − 4), common practice, no source) cost
    # about one subject per group at d = 0.5 (pooled t: 63.77, Cohen 1988, Table 2.4.1: 64).
    n_t = TTestIndPower().solve_power(effect_size=0.5, alpha=0.05, power=0.8)
    n = raw_n(ancova(0.0))
    assert n_t + 0.5 < n < n_t + 1.5
    record = compute(load_question(ancova(0.5)))
    assert record["method"]["derived"]["design_factor"] == pytest.approx(0.75)
    assert (
        record["method"]["analysis_label"] == "Analysis of covariance on the baseline measurement"
    )


def test_the_correlation_is_required_and_named():
    body = ancova()
    del body["assumptions"]["baseline_correlation"]
    with pytest.raises(QuestionError) as info:
        compute(load_question(body))
    assert info.value.field == "assumptions.baseline_correlation"


def test_vectorized_fit_matches_statsmodels_ols():
    # statsmodels OLS: y ~ 1 + group + baseline, replicate by replicate.
    task = ChunkTask(
        kernel="ancova",
        analysis="ancova",
        models=[
            {"family": "normal", "mean": 10.0, "sd": 2.0},
            {"family": "normal", "mean": 11.0, "sd": 2.0},
        ],
        per_group=[9, 13],
        alpha=0.05,
        rule={"aim": "superiority", "alternative": "two-sided", "direction": 1, "margin": None},
        settings={"baseline_correlation": 0.6},
        summaries=False,
        seed=7,
        stream=0,
        chunk=0,
        chunk_size=5,
        replicates=5,
    )
    (x1, y1), (x2, y2) = ancova_data(Streams(7, 0, 0), task, 5)
    est, se, df = vectests.ancova_t(x1, y1, x2, y2)
    assert df == 19
    for row in range(5):
        y = np.concatenate([y1[row], y2[row]])
        group = np.r_[np.zeros(9), np.ones(13)]
        x = np.concatenate([x1[row], x2[row]])
        fit = sm.OLS(y, sm.add_constant(np.column_stack([group, x]))).fit()
        assert est[row] == pytest.approx(fit.params[1], rel=1e-10)
        assert se[row] == pytest.approx(fit.bse[1], rel=1e-10)


def _simulated(body: dict) -> dict:
    body = dict(body, method="simulation", simulation={"replicates": 4000, "seed": 20261202})
    return compute(load_question(body))


@pytest.mark.parametrize(
    ("rho", "sizes", "extra"),
    [
        (0.5, [30, 30], {}),
        (0.7, [12, 24], {"allocation_ratio": 2.0}),
        (
            0.6,
            [40, 40],
            {
                "alternative": "one-sided",
                "alpha": 0.025,
                "hypothesis": {"aim": "noninferiority", "margin": -0.4},
            },
        ),
    ],
)
def test_simulated_ancova_agrees_with_the_analytic_power(rho, sizes, extra):
    body = ancova(rho, 0.5 if not extra.get("hypothesis") else 0.0, **extra)
    body.update(find="power", sample_size={"per_group": sizes})
    record = _simulated(body)
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
    assert record["type_i_error"]["verdict"] != "exceeds"


def test_ancova_simulation_refuses_a_skewed_data_model():
    body = ancova(find="power", sample_size={"per_group": [30, 30]})
    body.update(
        method="simulation",
        simulation={
            "replicates": 1000,
            "seed": 1,
            "data": {
                "control": {"family": "lognormal", "mu": 0.0, "sigma": 1.0},
                "treatment": {"family": "lognormal", "mu": 0.5, "sigma": 1.0},
            },
        },
    )
    del body["effect"]
    body["assumptions"] = {"baseline_correlation": 0.5}
    with pytest.raises(QuestionError) as info:
        compute(load_question(body))
    assert info.value.field == "simulation.data.control.family"


def test_ancova_needs_fewer_than_the_t_test():
    # formula: the whole point: at ρ = 0.5 about three quarters of the t test's size.
    n_t = math.ceil(TTestIndPower().solve_power(effect_size=0.5, alpha=0.05, power=0.8))
    record = compute(load_question(ancova(0.5)))
    assert record["sample_size"]["per_group"][0] < n_t


def test_the_robustness_panel_is_refused_for_ancova_on_its_analysis():
    from service.engine import explore

    q = load_question(ancova(find="power", sample_size={"per_group": [30, 30]}))
    with pytest.raises(QuestionError) as info:
        explore.robustness(q, [30, 30], replicates=400, seed=1)
    assert info.value.field == "analysis"
    assert "ancova" in info.value.message
