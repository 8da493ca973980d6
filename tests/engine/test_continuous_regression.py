"""Continuous outcome, linear regression (continuous × regression): the partial F test by the
noncentral F (Cohen 1988, ch. 9), checked against statsmodels and scipy, then the simulated
power against the analytic power within 4 MCSE."""

from __future__ import annotations

import math

import pytest
from scipy import stats
from statsmodels.stats.power import FTestPowerF2

from service.engine import compute
from service.schemas import QuestionInvalid, load_question


def regression(**over) -> dict:
    body = {
        "outcome": "continuous",
        "layout": "regression",
        "find": "sample_size",
        "effect": {"f_squared": 0.15},
    }
    body.update(over)
    return body


def answer(body: dict) -> dict:
    return compute(load_question(body))


@pytest.mark.parametrize(
    ("f2", "u", "k", "power"), [(0.15, 1, 0, 0.8), (0.0667, 1, 3, 0.9), (0.02, 3, 5, 0.8)]
)
def test_sample_size_matches_statsmodels_ftestpowerf2(f2, u, k, power):
    # general-purpose library: statsmodels FTestPowerF2 solves the denominator df with
    # λ = f²·(df_num + df_denom + ncc); ncc = k + 1 makes that λ = f²·N (Cohen 1988, ch. 9).
    df2 = FTestPowerF2().solve_power(
        effect_size=f2, df_num=u, df_denom=None, alpha=0.05, power=power, ncc=k + 1
    )
    expected = df2 + u + k + 1
    record = answer(
        regression(
            effect={"f_squared": f2},
            assumptions={"tested_predictors": u, "other_predictors": k},
            target_power=power,
        )
    )
    base = record["sample_size"]["steps"][0]
    assert base["per_group_raw"][0] == pytest.approx(expected, rel=1e-6)
    assert record["sample_size"]["total"] == math.ceil(expected)


def test_power_is_the_noncentral_f_from_scipy():
    # formula: Cohen (1988), ch. 9: power = P(F'(u, N − u − k − 1; λ = f²·N) > F crit), here
    # R² increment 0.05 over 0.20 (f² = 0.05/0.75), 1 tested and 3 other predictors, N = 120.
    f2, n = 0.05 / 0.75, 120
    crit = stats.f.isf(0.05, 1, n - 5)
    expected = stats.ncf.sf(crit, 1, n - 5, f2 * n)
    record = answer(
        regression(
            find="power",
            sample_size={"per_group": [n]},
            effect={"r2_increment": 0.05},
            assumptions={"r2_other": 0.2, "tested_predictors": 1, "other_predictors": 3},
        )
    )
    assert record["power"]["estimate"] == pytest.approx(expected, abs=1e-10)
    assert record["method"]["derived"]["f_squared"] == pytest.approx(f2)
    assert record["method"]["derived"]["full_model_r_squared"] == pytest.approx(0.25)


@pytest.mark.parametrize(("u", "printed"), [(3, 76), (5, 91)])
def test_cohen_medium_effect_sizes(u, printed):
    # from memory: Cohen (1992), Psychol Bull 112:155, Table 2 (multiple regression, medium
    # f² = 0.15, alpha .05, power .80): 3 predictors N = 76, 5 predictors N = 91. Cohen's tables
    # come from approximations; the exact noncentral F lands within one subject.
    record = answer(regression(assumptions={"tested_predictors": u}))
    assert abs(record["sample_size"]["total"] - printed) <= 1


def test_slope_form_gives_the_same_f_squared():
    # formula: f² = β²·σ_x²·(1 − R²_x)/σ² for one coefficient: 0.5²·2²·(1 − 0.2)/3² = 0.0889.
    record = answer(
        regression(
            effect={"slope": 0.5},
            assumptions={
                "sd_predictor": 2.0,
                "sd_residual": 3.0,
                "r2_covariates": 0.2,
                "other_predictors": 2,
            },
        )
    )
    f2 = 0.25 * 4 * 0.8 / 9
    assert record["method"]["derived"]["f_squared"] == pytest.approx(f2)
    same = answer(regression(effect={"f_squared": f2}, assumptions={"other_predictors": 2}))
    assert record["sample_size"] == same["sample_size"]


def test_find_effect_returns_f_squared_reaching_target():
    record = answer(
        regression(find="effect", effect={}, sample_size={"per_group": [200]}, target_power=0.8)
    )
    assert record["effect"]["field"] == "f_squared"
    f2 = record["effect"]["value"]
    crit = stats.f.isf(0.05, 1, 198)
    assert stats.ncf.sf(crit, 1, 198, f2 * 200) == pytest.approx(0.8, abs=1e-6)


def test_bad_input_is_refused_naming_the_field():
    with pytest.raises(QuestionInvalid) as e:
        load_question(regression(effect={"slope": 1.0}, assumptions={"sd_predictor": 1.0}))
    assert "assumptions.sd_residual" in e.value.errors
    with pytest.raises(QuestionInvalid) as e:
        load_question(regression(effect={"r2_increment": 0.5}, assumptions={"r2_other": 0.6}))
    assert "effect.r2_increment" in e.value.errors
    with pytest.raises(QuestionInvalid) as e:
        load_question(regression(alternative="one-sided"))
    assert "alternative" in e.value.errors


def test_too_few_subjects_for_the_predictors_is_refused():
    with pytest.raises(Exception) as e:
        answer(
            regression(
                find="power",
                sample_size={"per_group": [5]},
                assumptions={"tested_predictors": 2, "other_predictors": 3},
            )
        )
    assert "sample_size.per_group" in str(e.value)


def test_simulated_power_agrees_with_the_analytic_power():
    # Large N and a small f²: the random-predictor noncentrality (mean f²·(N − k − 1)) and
    # Cohen's fixed-predictor λ = f²·N then differ by much less than the Monte Carlo error.
    body = regression(
        find="power",
        sample_size={"per_group": [400]},
        effect={"f_squared": 0.02},
        assumptions={"tested_predictors": 1, "other_predictors": 2},
        method="simulation",
        simulation={"replicates": 4000, "seed": 20261202},
    )
    record = answer(body)
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) < 4 * power["mcse"]
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")
    assert record["method"]["data"]["regression"]["f_squared"] == pytest.approx(0.02)
