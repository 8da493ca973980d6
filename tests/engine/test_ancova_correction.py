"""The ANCOVA small-sample correction, checked against its formula and against the fit itself.

The engine (continuous_two_groups.ancova_se_df) plans the baseline-adjusted difference with
variance σ²(1 − ρ²)(1/n₁ + 1/n₂)·(1 + 1/(N − 4)) on N − 3 df: the design factor 1 − ρ² of
Borm, Fransen & Lemmens (2007), J Clin Epidemiol 60:1234 (*formula*), times
the expected inflation from estimating the slope with a random baseline. That inflation is
E[1 + (x̄₂ − x̄₁)²/(Sxx(1/n₁ + 1/n₂))] = 1 + E[χ²₁/χ²_{N−2}]; it is checked here by scipy's
numerical integration over the two chi-square laws (*formula*, computed in the test), not by a
recalled number (the paper's own correction is not restated here: we do not hold its text).
The simulation checks fit the ANCOVA per replicate (vectorized least squares, itself checked
against statsmodels OLS in test_ancova.py) and compare the empirical variance of the estimate
and the rejection rate with the planned ones.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from service.engine import compute, vectests
from service.engine.chunks import ChunkTask, Streams
from service.engine.designs.continuous_two_groups import ancova_se_df
from service.engine.kernels import ancova_data
from service.schemas import load_question


def _q(rho: float, sd: float = 1.0) -> dict:
    return {"assumptions": {"sd": sd, "baseline_correlation": rho}, "effect": {}}


def _ratio_mean_by_integration(nu: int) -> float:
    """E[χ²₁/χ²_ν] by integrating 1/v against the χ²_ν density (E[χ²₁] = 1, independent)."""
    value, _ = integrate.quad(lambda v: stats.chi2.pdf(v, nu) / v, 0, np.inf, limit=200)
    return value


@pytest.mark.parametrize(("n1", "n2", "rho"), [(6, 6, 0.5), (10, 14, 0.3), (40, 40, 0.7)])
def test_planned_variance_is_design_factor_times_slope_inflation(n1, n2, rho):
    se, df = ancova_se_df(_q(rho, 2.0), n1, n2)
    total = n1 + n2
    assert df == total - 3  # one df each for the two means and the common slope
    inflation = 1.0 + _ratio_mean_by_integration(total - 2)
    expected = (1 - rho**2) * 4.0 * (1 / n1 + 1 / n2) * inflation
    assert se**2 == pytest.approx(expected, rel=1e-8)
    # the integration agrees with the closed form 1/(N − 4) (mean of F(1, ν) is ν/(ν − 2))
    assert inflation - 1 == pytest.approx(stats.f.mean(1, total - 2) / (total - 2), rel=1e-8)


def _fit(n1: int, n2: int, rho: float, reps: int, seed: int):
    task = ChunkTask(
        kernel="ancova",
        analysis="ancova",
        models=[
            {"family": "normal", "mean": 0.0, "sd": 1.0},
            {"family": "normal", "mean": 0.0, "sd": 1.0},
        ],
        per_group=[n1, n2],
        alpha=0.05,
        rule={"aim": "superiority", "alternative": "two-sided", "direction": 1, "margin": None},
        settings={"baseline_correlation": rho},
        summaries=False,
        seed=seed,
        stream=0,
        chunk=0,
        chunk_size=reps,
        replicates=reps,
    )
    (x1, y1), (x2, y2) = ancova_data(Streams(seed, 0, 0), task, reps)
    return vectests.ancova_t(x1, y1, x2, y2)


@pytest.mark.parametrize(("n1", "n2", "rho"), [(6, 6, 0.5), (8, 16, 0.7)])
def test_simulated_variance_of_the_fitted_difference_matches_the_planned_one(n1, n2, rho):
    reps = 40000
    est, _, _ = _fit(n1, n2, rho, reps, seed=20261202)
    se, _ = ancova_se_df(_q(rho), n1, n2)
    observed = est.var(ddof=1)
    # the variance of a normal sample variance: relative MCSE √(2/(reps − 1))
    assert abs(observed / se**2 - 1) <= 4 * math.sqrt(2 / (reps - 1))
    # the slope term matters at this size: without it the planned variance is visibly short
    without = (1 - rho**2) * (1 / n1 + 1 / n2)
    assert observed / without - 1 > 8 * math.sqrt(2 / (reps - 1))


def test_simulated_ancova_power_matches_the_corrected_plan_at_small_n():
    body = {
        "outcome": "continuous",
        "layout": "two_groups",
        "analysis": "ancova",
        "find": "power",
        "effect": {"difference": 1.0},
        "assumptions": {"sd": 1.0, "baseline_correlation": 0.6},
        "sample_size": {"per_group": [8, 8]},
        "method": "simulation",
        "simulation": {"replicates": 4000, "seed": 77},
    }
    record = compute(load_question(body))
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
