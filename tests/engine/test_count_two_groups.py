"""Event counts in two groups (count × two_groups): the Wald test of the log rate ratio with
Poisson or negative binomial variance. Reference values from the Zhu & Lakkis (2014) formula
recomputed by hand and from statsmodels.stats.rates (a general-purpose implementation of the
same formulas), then simulated power against the formula within 4 MCSE."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from scipy import optimize, stats
from statsmodels.stats.rates import (
    power_equivalence_neginb_2indep,
    power_negbin_ratio_2indep,
    power_poisson_ratio_2indep,
)
from statsmodels.stats.rates import (
    test_poisson_2indep as poisson_2indep_check,
)

from service.engine import QuestionError, compute, designs
from service.engine.vectests import rate_ratio_wald
from service.schemas import QuestionInvalid, load_question


def counts(**over) -> dict:
    body = {
        "outcome": "count",
        "layout": "two_groups",
        "find": "sample_size",
        "alpha": 0.05,
        "target_power": 0.8,
        "effect": {"rate_ratio": 0.7},
        "assumptions": {
            "time_unit": "years",
            "control_rate": 0.8,
            "follow_up": 1.0,
            "overdispersion": 0.6,
        },
    }
    body.update(over)
    if body["find"] == "power":
        body.pop("target_power")
    return body


def answer(body: dict) -> dict:
    return compute(load_question(body))


def _raw(record: dict) -> list[float]:
    return record["sample_size"]["steps"][0]["per_group_raw"]


# --- reference values -----------------------------------------------------------------------


def test_negative_binomial_sample_size_is_the_zhu_lakkis_formula():
    # formula: Zhu & Lakkis (2014), Stat Med 33:376, with the null variance equal to the
    # alternative's: n per group = (z_{α/2} + z_β)²·[(1/(μ₀t) + κ) + (1/(μ₁t) + κ)] / ln²(RR).
    # Recomputed by hand for μ₀ = 0.8/year, RR 0.7, t = 1 year, κ = 0.6, α 0.05, power 0.8
    # (the far tail is included in the record's power, so n is solved by root: within 0.01).
    w = (1 / 0.8 + 0.6) + (1 / 0.56 + 0.6)
    n = (stats.norm.ppf(0.975) + stats.norm.ppf(0.8)) ** 2 * w / math.log(0.7) ** 2
    record = answer(counts())
    assert _raw(record)[0] == pytest.approx(n, abs=0.01)
    assert record["sample_size"]["per_group"] == [math.ceil(_raw(record)[0])] * 2
    assert record["method"]["analysis"] == "negative_binomial_wald"


@pytest.mark.parametrize(
    ("ratio", "kappa", "follow_up", "n", "allocation"),
    [(0.7, 0.6, 1.0, 150, 1.0), (0.5, 1.2, 0.5, 60, 1.0), (1.4, 0.3, 2.0, 80, 2.0)],
)
def test_negative_binomial_power_matches_statsmodels(ratio, kappa, follow_up, n, allocation):
    # statsmodels.stats.rates.power_negbin_ratio_2indep (method_var="alt": the Wald test; it
    # implements Zhu & Lakkis 2014): sample 1 is the treatment group, nobs_ratio = control /
    # treatment, exposure = follow-up per subject, dispersion κ with Var = μ + κμ².
    body = counts(
        find="power",
        effect={"rate_ratio": ratio},
        assumptions={
            "time_unit": "years",
            "control_rate": 0.8,
            "follow_up": follow_up,
            "overdispersion": kappa,
        },
        sample_size={"per_group": [n, math.ceil(n * allocation)]},
        allocation_ratio=allocation,
    )
    record = answer(body)
    n1 = math.ceil(n * allocation)
    expected = power_negbin_ratio_2indep(
        0.8 * ratio,
        0.8,
        n1,
        nobs_ratio=n / n1,
        exposure=follow_up,
        value=1,
        alpha=0.05,
        dispersion=kappa,
        alternative="two-sided",
        method_var="alt",
        return_results=False,
    )
    assert record["power"]["estimate"] == pytest.approx(float(expected), abs=1e-10)


def test_pooled_null_variance_matches_statsmodels_ftotal():
    # statsmodels power_negbin_ratio_2indep, method_var="ftotal": the null variance at the
    # pooled rate (λ₀ + λ₁)/2 for equal groups (Zhu & Lakkis 2014).
    body = counts(
        find="power",
        sample_size={"per_group": [120, 120]},
        analysis_options={"null_variance": "pooled"},
    )
    expected = power_negbin_ratio_2indep(
        0.56, 0.8, 120, exposure=1.0, dispersion=0.6, method_var="ftotal", return_results=False
    )
    assert answer(body)["power"]["estimate"] == pytest.approx(float(expected), abs=1e-10)


@pytest.mark.parametrize("method_var", ["alt", "score"])
def test_poisson_power_matches_statsmodels(method_var):
    # statsmodels power_poisson_ratio_2indep (Zhu & Lakkis 2014 / Zhu 2017, Poisson case):
    # "alt" is the Wald test, "score" its null variance at the pooled rate (our 'pooled').
    body = counts(
        find="power",
        effect={"rate_ratio": 1.5},
        assumptions={"time_unit": "months", "control_rate": 0.2, "follow_up": 6.0},
        sample_size={"per_group": [40, 40]},
        analysis_options={"null_variance": "alternative" if method_var == "alt" else "pooled"},
    )
    record = answer(body)
    assert record["method"]["analysis"] == "poisson_wald"
    expected = power_poisson_ratio_2indep(
        0.3,
        0.2,
        40,
        exposure=6.0,
        value=1,
        alpha=0.05,
        dispersion=1,
        alternative="two-sided",
        method_var=method_var,
        return_results=False,
    )
    assert record["power"]["estimate"] == pytest.approx(float(expected), abs=1e-10)


def test_noninferiority_on_the_rate_ratio_matches_statsmodels():
    # statsmodels power_negbin_ratio_2indep with value = the limit 1.25 and alternative
    # "smaller" (fewer events are better), method_var="alt" (Zhu 2017, Wald form).
    margin = math.log(1.25)
    body = counts(
        find="power",
        effect={"rate_ratio": 1.0},
        alpha=0.025,
        hypothesis={"aim": "noninferiority", "margin": margin, "higher_is_better": False},
        sample_size={"per_group": [400, 400]},
    )
    expected = power_negbin_ratio_2indep(
        0.8,
        0.8,
        400,
        value=1.25,
        alpha=0.025,
        dispersion=0.6,
        alternative="smaller",
        method_var="alt",
        return_results=False,
    )
    record = answer(body)
    assert record["power"]["estimate"] == pytest.approx(float(expected), abs=1e-10)
    assert "1.25 on the rate ratio" in " ".join(record["method"]["notes"])


def test_equivalence_matches_statsmodels():
    # statsmodels power_equivalence_neginb_2indep: TOST on the log rate ratio, limits 0.8–1.25,
    # each one-sided test at 0.05, method_var="alt".
    body = counts(
        find="power",
        effect={"rate_ratio": 1.0},
        alpha=0.05,
        alternative="one-sided",
        hypothesis={"aim": "equivalence", "margin": math.log(1.25)},
        sample_size={"per_group": [500, 500]},
    )
    expected = power_equivalence_neginb_2indep(
        0.8, 0.8, 500, 0.8, 1.25, alpha=0.05, dispersion=0.6, method_var="alt"
    )
    assert answer(body)["power"]["estimate"] == pytest.approx(float(expected), abs=1e-8)


def test_sample_size_agrees_with_the_statsmodels_power_curve():
    # statsmodels power_negbin_ratio_2indep solved for n by root finding: the same raw size.
    record = answer(counts(target_power=0.9))

    def gap(n):
        return power_negbin_ratio_2indep(0.56, 0.8, n, dispersion=0.6, return_results=False) - 0.9

    assert _raw(record)[0] == pytest.approx(optimize.brentq(gap, 10, 2000), rel=1e-6)


def test_staggered_entry_uses_the_follow_up_spread():
    # formula: follow-up uniform on [F, F + A]: t̄ = F + A/2, E[t²]/t̄² = 1 + A²/(12 t̄²);
    # W per group = 1/(λ t̄) + κ E[t²]/t̄² (the variance of events over total exposure).
    body = counts(
        find="power",
        assumptions={
            "time_unit": "years",
            "control_rate": 0.8,
            "follow_up": 0.5,
            "accrual": 1.0,
            "overdispersion": 0.6,
        },
        sample_size={"per_group": [150, 150]},
    )
    record = answer(body)
    tbar, rho = 1.0, 1 + 1 / 12
    w = (1 / (0.8 * tbar) + 0.6 * rho) + (1 / (0.56 * tbar) + 0.6 * rho)
    shift = abs(math.log(0.7)) / math.sqrt(w / 150)
    z = stats.norm.ppf(0.975)
    expected = stats.norm.cdf(shift - z) + stats.norm.cdf(-shift - z)
    assert record["power"]["estimate"] == pytest.approx(expected, abs=1e-12)
    assert record["method"]["derived"]["follow_up_spread"] == pytest.approx(rho)


@pytest.mark.parametrize("higher", [True, False])
def test_detectable_rate_ratio_gives_the_target_back(higher):
    # formula: the solved ratio gives the target power back; it lies below 1 when fewer events
    # are better (higher_is_better false), above 1 otherwise.
    body = counts(
        find="effect",
        sample_size={"per_group": [200, 200]},
        target_power=0.8,
        hypothesis={"aim": "superiority", "higher_is_better": higher},
    )
    del body["effect"]
    record = answer(body)
    ratio = record["effect"]["value"]
    assert (ratio > 1.0) if higher else (0.5 < ratio < 1.0)
    back = answer(
        counts(find="power", effect={"rate_ratio": ratio}, sample_size={"per_group": [200, 200]})
    )
    assert back["power"]["estimate"] == pytest.approx(0.8, abs=1e-6)


def test_poisson_wald_with_overdispersion_is_refused_analytically():
    body = counts(analysis="poisson_wald")
    with pytest.raises(QuestionError) as info:
        answer(body)
    assert info.value.field == "analysis"
    assert "negative_binomial_wald" in str(info.value)


def test_rate_ratio_of_one_is_refused_for_the_sample_size():
    with pytest.raises(QuestionInvalid) as info:
        load_question(counts(effect={"rate_ratio": 1.0}))
    assert "effect.rate_ratio" in info.value.errors


def test_time_unit_is_required():
    body = counts(assumptions={"control_rate": 0.8, "follow_up": 1.0})
    with pytest.raises(QuestionInvalid) as info:
        load_question(body)
    assert "assumptions.time_unit" in info.value.errors


def test_catalogue_order_lists_the_cell():
    assert "count × two_groups" in designs.cells()


# --- the vectorized Wald statistic against a direct computation -----------------------------


def test_rate_ratio_wald_matches_a_direct_computation():
    # common practice, no source: the log ratio of events over exposure and its SE
    # √(1/E₀ + 1/E₁ + κ̂(Σt₀²/T₀² + Σt₁²/T₁²)), κ̂ the method-of-moments dispersion, one
    # replicate computed by plain Python loops.
    rng = np.random.default_rng(7)
    t0, t1 = rng.uniform(0.5, 1.5, (1, 30)), rng.uniform(0.5, 1.5, (1, 25))
    y0 = rng.negative_binomial(2, 2 / (2 + 0.8 * t0)).astype(float)
    y1 = rng.negative_binomial(2, 2 / (2 + 0.5 * t1)).astype(float)
    est, se = rate_ratio_wald(y0, t0, y1, t1, estimate_dispersion=True)
    num = den = 0.0
    parts = []
    for y, t in ((y0[0], t0[0]), (y1[0], t1[0])):
        big_t, events = t.sum(), y.sum()
        rate = events / big_t
        num += sum(
            (yi - rate * ti) ** 2 - rate * ti * (1 - ti / big_t)
            for yi, ti in zip(y, t, strict=True)
        )
        s2 = (t**2).sum()
        den += sum(rate**2 * (ti**2 - 2 * ti**3 / big_t + ti**2 * s2 / big_t**2) for ti in t)
        parts.append((events, big_t, s2))
    kappa = max(num / den, 0.0)
    var = sum(1 / e + kappa * s2 / big**2 for e, big, s2 in parts)
    direct = math.log(parts[1][0] / parts[1][1]) - math.log(parts[0][0] / parts[0][1])
    assert est[0] == pytest.approx(direct, rel=1e-12)
    assert se[0] == pytest.approx(math.sqrt(var), rel=1e-12)
    # with one follow-up for all, Poisson variance: SE = √(1/E₀ + 1/E₁)
    est, se = rate_ratio_wald(y0, 1.0, y1, 1.0, estimate_dispersion=False)
    assert se[0] == pytest.approx(math.sqrt(1 / y0.sum() + 1 / y1.sum()))


def test_poisson_wald_statistic_matches_statsmodels_test_poisson_2indep():
    # statsmodels.stats.rates.test_poisson_2indep(method="wald-log"): the Wald test of the log
    # rate ratio with variance 1/events₁ + 1/events₂, on per-subject counts with unequal
    # follow-up summed to events and exposure per group.
    rng = np.random.default_rng(11)
    t0, t1 = rng.uniform(1, 3, (1, 20)), rng.uniform(1, 3, (1, 24))
    y0 = rng.poisson(0.9 * t0).astype(float)
    y1 = rng.poisson(0.6 * t1).astype(float)
    est, se = rate_ratio_wald(y0, t0, y1, t1, estimate_dispersion=False)
    ref = poisson_2indep_check(y1.sum(), t1.sum(), y0.sum(), t0.sum(), method="wald-log")
    assert est[0] / se[0] == pytest.approx(float(ref.statistic), rel=1e-12)


# --- simulation against the formula ---------------------------------------------------------


def _simulated(body: dict, replicates: int = 4000) -> dict:
    sim = copy.deepcopy(body)
    sim.update(method="simulation", simulation={"replicates": replicates, "seed": 20261202})
    return answer(sim)


def _agree(record: dict) -> None:
    power = record["power"]
    assert power["analytic"] is not None
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power


def test_simulated_negative_binomial_agrees():
    record = _simulated(counts(find="power", sample_size={"per_group": [150, 150]}))
    _agree(record)
    assert record["method"]["data"]["counts"] == "negative binomial (gamma-Poisson)"
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")


def test_simulated_poisson_with_staggered_entry_agrees():
    body = counts(
        find="power",
        effect={"rate_ratio": 1.5},
        assumptions={"time_unit": "months", "control_rate": 0.2, "follow_up": 3.0, "accrual": 6.0},
        sample_size={"per_group": [40, 50]},
        allocation_ratio=1.25,
    )
    _agree(_simulated(body))


def test_simulated_noninferiority_agrees():
    body = counts(
        find="power",
        effect={"rate_ratio": 0.95},
        alpha=0.025,
        hypothesis={"aim": "noninferiority", "margin": math.log(1.3), "higher_is_better": False},
        sample_size={"per_group": [300, 300]},
        assumptions={
            "time_unit": "years",
            "control_rate": 1.2,
            "follow_up": 1.0,
            "overdispersion": 0.4,
        },
    )
    _agree(_simulated(body))


def test_poisson_test_on_overdispersed_counts_exceeds_alpha():
    # The Poisson variance ignores κ = 1: its type I error check must say so (simulation only).
    body = counts(
        find="power",
        analysis="poisson_wald",
        assumptions={
            "time_unit": "years",
            "control_rate": 2.0,
            "follow_up": 1.0,
            "overdispersion": 1.0,
        },
        sample_size={"per_group": [60, 60]},
    )
    record = _simulated(body, replicates=2000)
    assert record["type_i_error"]["verdict"] == "exceeds"
    assert record["type_i_error"]["estimate"] > 0.1


def test_simulated_sample_size_search_lands_near_the_formula():
    record = _simulated(counts(), replicates=2000)
    analytic = answer(counts())["sample_size"]["per_group"][0]
    assert abs(record["sample_size"]["per_group"][0] - analytic) <= 0.1 * analytic


def test_pooled_null_variance_is_refused_for_a_simulation():
    # The simulation runs the Wald test itself; 'pooled' only changes the formula.
    body = counts(
        find="power",
        sample_size={"per_group": [100, 100]},
        analysis_options={"null_variance": "pooled"},
        method="simulation",
        simulation={"replicates": 200, "seed": 1},
    )
    with pytest.raises(QuestionError) as info:
        answer(body)
    assert info.value.field == "analysis_options.null_variance"


def test_small_overdispersed_groups_warn_and_the_simulation_reports_the_level():
    # Observed here, no source: with 30 per group and κ = 1 the Wald test with the
    # method-of-moments dispersion rejects more often than alpha; the analytic record warns and
    # the simulated record's type I error check is where the size is reported.
    body = counts(
        find="power",
        sample_size={"per_group": [30, 30]},
        assumptions={
            "time_unit": "years",
            "control_rate": 1.0,
            "follow_up": 1.0,
            "overdispersion": 1.0,
        },
    )
    record = answer(body)
    assert any("can exceed alpha" in w for w in record["warnings"])
    simulated = _simulated(body)
    assert simulated["type_i_error"]["verdict"] == "exceeds", simulated["type_i_error"]
