"""Binary × two_groups on the risk-ratio and odds-ratio scales: the score statistics of
Farrington & Manning (1990) and Miettinen & Nurminen (1985), their restricted MLE, their power
(normal approximation and exact enumeration) and the simulated test, each checked against
statsmodels, scipy or a computation that shares no code with the engine."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from scipy import optimize, stats
from statsmodels.stats import proportion as smp

from service.engine import compute
from service.engine.designs import binary_scales as bs
from service.engine.designs import get
from service.schemas import QuestionInvalid, load_question

DESIGN = get("binary", "two_groups")
COMPARE = {"difference": "diff", "risk_ratio": "ratio", "odds_ratio": "odds-ratio"}


LN_08 = math.log(0.8)


def body(scale="risk_ratio", margin=LN_08, **over) -> dict:
    out = {
        "outcome": "binary",
        "layout": "two_groups",
        "find": "sample_size",
        "alternative": "one-sided",
        "effect": {"p_treatment": 0.85},
        "assumptions": {"p_control": 0.85},
        "analysis_options": {"scale": scale},
        "hypothesis": {"aim": "noninferiority", "margin": margin},
    }
    out.update(over)
    return out


def answer(b: dict) -> dict:
    return compute(load_question(b))


# --- the statistic and its restricted MLE against statsmodels -----------------------------------


@pytest.mark.parametrize("scale,value", [("risk_ratio", 0.8), ("odds_ratio", 0.7)])
@pytest.mark.parametrize("counts", [(30, 100, 38, 90), (12, 40, 7, 50), (3, 20, 9, 25)])
@pytest.mark.parametrize("mn", [True, False])
def test_ratio_score_statistic_matches_statsmodels(scale, value, counts, mn):
    # General-purpose library: statsmodels smp.test_proportions_2indep(method="score"), which
    # implements Miettinen & Nurminen (1985) (correction=True) and Farrington & Manning (1990)
    # (correction=False) for the ratio and the odds ratio; its group 1 is our treatment.
    x1, n1, x2, n2 = counts
    ref = smp.test_proportions_2indep(
        x2, n2, x1, n1, value=value, method="score", compare=COMPARE[scale],
        alternative="larger", correction=mn, return_results=True,
    )  # fmt: skip
    got = bs.score_z(x1, n1, x2, n2, scale, math.log(value), mn=mn)
    assert float(got) == pytest.approx(ref.statistic, rel=1e-9)
    q1, q2 = bs.restricted_mle(x1 / n1, x2 / n2, n1, n2, scale, math.log(value))
    assert float(q2) == pytest.approx(ref.prop1_null, rel=1e-9)
    assert float(q1) == pytest.approx(ref.prop2_null, rel=1e-9)


@pytest.mark.parametrize("counts", [(30, 100, 38, 90), (12, 40, 7, 50), (30, 100, 42, 100)])
def test_difference_restricted_mle_is_the_numerical_constrained_maximum(counts):
    # Independent computation: scipy's bounded maximization of the binomial log likelihood along
    # p_treatment = p_control + delta (Miettinen & Nurminen 1985 define the estimate this way).
    x1, n1, x2, n2 = counts
    delta = -0.1

    def nll(p):
        return -(stats.binom.logpmf(x1, n1, p) + stats.binom.logpmf(x2, n2, p + delta))

    best = optimize.minimize_scalar(nll, bounds=(0.1 + 1e-9, 1 - 1e-9), method="bounded")
    q1, q2 = bs.restricted_mle(x1 / n1, x2 / n2, n1, n2, "difference", delta)
    assert float(q1) == pytest.approx(best.x, abs=1e-5)
    assert float(q2) == pytest.approx(best.x + delta, abs=1e-5)


# --- exact enumeration against statsmodels' decisions --------------------------------------------


@pytest.mark.filterwarnings("ignore::RuntimeWarning")  # statsmodels on 0/0 tables (p-value nan)
@pytest.mark.parametrize(
    "scale,aim,margin,higher",
    [
        ("risk_ratio", "noninferiority", math.log(0.75), True),
        ("odds_ratio", "noninferiority", math.log(1.8), False),
        ("risk_ratio", "equivalence", math.log(1.5), True),
    ],
)
def test_enumerated_power_matches_a_table_by_table_statsmodels_sum(scale, aim, margin, higher):
    # Independent computation: every table (x1, x2) at n = 14 and 17 decided by statsmodels'
    # Miettinen-Nurminen score p-value (test_proportions_2indep, correction=True) and weighted
    # by scipy's binomial probabilities; the engine builds its rejection region on its own.
    n1, n2, alpha, p1, p2 = 14, 17, 0.05, 0.5, 0.55
    grid = bs.reject_grid(n1, n2, scale, aim, margin, higher, alpha)
    total = 0.0
    for x1 in range(n1 + 1):
        for x2 in range(n2 + 1):
            if aim == "noninferiority":
                ref = smp.test_proportions_2indep(
                    x2, n2, x1, n1, value=math.exp(margin), method="score",
                    compare=COMPARE[scale], alternative="larger" if higher else "smaller",
                    correction=True,
                )  # fmt: skip
                reject = ref.pvalue < alpha
            else:
                lo = smp.test_proportions_2indep(
                    x2, n2, x1, n1, value=math.exp(-margin), method="score",
                    compare=COMPARE[scale], alternative="larger", correction=True,
                )  # fmt: skip
                hi = smp.test_proportions_2indep(
                    x2, n2, x1, n1, value=math.exp(margin), method="score",
                    compare=COMPARE[scale], alternative="smaller", correction=True,
                )  # fmt: skip
                reject = lo.pvalue < alpha and hi.pvalue < alpha
            assert bool(grid[x1, x2]) == bool(reject), (x1, x2)
            total += stats.binom.pmf(x1, n1, p1) * stats.binom.pmf(x2, n2, p2) * reject
    assert bs.enumerated_power(grid, p1, p2) == pytest.approx(total, abs=1e-12)


# --- analytic sample sizes --------------------------------------------------------------------


def test_farrington_manning_ratio_sample_size_formula():
    # formula: Farrington & Manning (1990), Stat Med 9:1447, sample size for H0: p2/p1 ≤ θ0,
    # n1 = (zα·√V0 + zβ·√V1)² / (p2 − θ0·p1)² with V0 = θ0²·p̃1q̃1 + p̃2q̃2/r, V1 the same at the
    # assumed proportions; restricted MLE p̃ from statsmodels (independent of the engine).
    p1 = p2 = 0.85
    theta, alpha, power = 0.8, 0.025, 0.8
    # statsmodels' restricted MLE at the expected tables (large n keeps the counts whole-ish)
    ref = smp.test_proportions_2indep(
        p2 * 1e6, 1e6, p1 * 1e6, 1e6, value=theta, method="score", compare="ratio",
        correction=False, return_results=True,
    )  # fmt: skip
    q2, q1 = ref.prop1_null, ref.prop2_null
    v0 = theta**2 * q1 * (1 - q1) + q2 * (1 - q2)
    v1 = theta**2 * p1 * (1 - p1) + p2 * (1 - p2)
    za, zb = stats.norm.isf(alpha), stats.norm.ppf(power)
    expected = (za * math.sqrt(v0) + zb * math.sqrt(v1)) ** 2 / (p2 - theta * p1) ** 2
    record = answer(body(analysis="score", alpha=alpha))
    assert record["sample_size"]["per_group"] == [math.ceil(expected)] * 2
    assert record["method"]["analysis"] == "score"
    assert "0.8 on the risk ratio" in " ".join(record["method"]["notes"])


def test_mn_power_is_close_to_the_enumerated_power_at_moderate_n():
    # formula check: the normal approximation of the MN test against its exact power by
    # enumeration (the same test) at 80 per group; common practice, no source, for the 0.02.
    q = load_question(body(find="power", sample_size={"per_group": [80, 80]}, analysis="mn_score"))
    approx = DESIGN.power(q, [80, 80], q["alpha"])
    exact = DESIGN.power(dict(q, analysis="mn_score_enumerated"), [80, 80], q["alpha"])
    assert abs(approx - exact) < 0.02
    assert 0.3 < exact < 0.99


def test_enumerated_sample_size_is_the_first_n_reaching_the_target():
    b = body(scale="odds_ratio", margin=math.log(0.5), analysis="mn_score_enumerated")
    b["effect"] = {"p_treatment": 0.7}
    b["assumptions"] = {"p_control": 0.7}
    record = answer(b)
    n = record["sample_size"]["per_group"][0]
    q = load_question(b)
    at = DESIGN.power(dict(q, find="power"), [n, n], q["alpha"])
    below = DESIGN.power(dict(q, find="power"), [n - 1, n - 1], q["alpha"])
    assert at >= 0.8 > below
    assert record["power"]["estimate"] == pytest.approx(at)


def test_enumeration_refuses_large_groups_with_the_limit():
    b = body(analysis="mn_score_enumerated", margin=math.log(0.95))
    with pytest.raises(Exception) as info:
        answer(b)
    assert "200" in str(getattr(info.value, "message", info.value)) or "200" in str(
        getattr(info.value, "errors", "")
    )


# --- validation -------------------------------------------------------------------------------


def test_a_ratio_scale_with_a_difference_analysis_is_refused_on_the_scale():
    with pytest.raises(Exception) as info:
        answer(body(analysis="unpooled_z"))
    assert "analysis_options.scale" in str(getattr(info.value, "errors", info.value))


def test_a_ratio_scale_for_superiority_is_refused():
    b = body(hypothesis={"aim": "superiority"}, alternative="two-sided")
    b["effect"] = {"p_treatment": 0.7}
    with pytest.raises(Exception) as info:
        answer(b)
    assert "analysis_options.scale" in str(getattr(info.value, "errors", info.value))


def test_an_effect_beyond_the_ratio_margin_is_refused_on_p_treatment():
    b = body()
    b["effect"] = {"p_treatment": 0.6}  # risk ratio 0.71, below the 0.8 limit
    with pytest.raises(QuestionInvalid) as info:
        load_question(b)
    assert "effect.p_treatment" in info.value.errors


def test_an_unknown_scale_is_refused():
    with pytest.raises(QuestionInvalid) as info:
        load_question(body(scale="hazard_ratio"))
    assert "analysis_options.scale" in info.value.errors


# --- simulation against the exact power -------------------------------------------------------


@pytest.mark.parametrize(
    "scale,aim,margin,p2,size",
    [
        ("risk_ratio", "noninferiority", math.log(0.8), 0.85, [120, 120]),
        ("odds_ratio", "equivalence", math.log(2.0), 0.6, [150, 180]),
    ],
)
def test_simulated_mn_score_agrees_with_the_enumerated_power(scale, aim, margin, p2, size):
    b = body(scale=scale, margin=margin, find="power", sample_size={"per_group": size})
    b["effect"] = {"p_treatment": p2}
    b["assumptions"] = {"p_control": 0.85 if aim == "noninferiority" else 0.6}
    b["hypothesis"] = {"aim": aim, "margin": margin}
    sim = copy.deepcopy(b)
    sim.update(
        method="simulation",
        analysis="mn_score",
        simulation={"replicates": 4000, "seed": 20261202},
    )
    record = answer(sim)
    q = load_question(b)
    exact = DESIGN.power(dict(q, analysis="mn_score_enumerated"), size, q["alpha"])
    power = record["power"]
    assert abs(power["estimate"] - exact) <= 4 * power["mcse"], (power, exact)
    assert record["method"]["analysis"] == "mn_score"


def test_the_simulated_null_sits_on_the_ratio_margin():
    q = load_question(body(find="power", sample_size={"per_group": [50, 50]}))
    arms = DESIGN.simulation.default_data(q)
    from service.engine.designs.base import DecisionRule

    rule = DecisionRule("noninferiority", "one-sided", 1, math.log(0.8))
    null, how = DESIGN.simulation.null_data(q, arms, rule)
    assert null[1]["p"] == pytest.approx(0.85 * 0.8)
    assert "risk ratio" in how
    assert np.isclose(bs.contrast(0.85, null[1]["p"], "risk_ratio"), math.log(0.8))


@pytest.mark.parametrize("scale", ["difference", "risk_ratio", "odds_ratio"])
def test_mn_sample_size_sits_on_its_power_curve_and_above_fm(scale):
    # formula: the MN null variance is the FM one times N/(N − 1) (Miettinen & Nurminen 1985),
    # so the MN size is the first n on its own curve and never below the FM size.
    margin = -0.1 if scale == "difference" else math.log(0.85)
    b = body(scale=scale, margin=margin, analysis="mn_score", alpha=0.025)
    q = load_question(b)
    n = answer(b)["sample_size"]["per_group"][0]
    fm = answer(dict(b, analysis="score"))["sample_size"]["per_group"][0]
    q_power = dict(q, find="power")
    assert (
        DESIGN.power(q_power, [n, n], 0.025) >= 0.8 > DESIGN.power(q_power, [n - 1, n - 1], 0.025)
    )
    assert fm <= n <= fm + 2


# --- the exact unconditional test ---------------------------------------------------------------


@pytest.mark.parametrize("tables", [(12, 15, [(2, 9), (3, 8), (5, 10), (1, 5), (0, 0)])])
def test_unconditional_pvalues_match_scipy_barnard_exact(tables):
    # General-purpose library: scipy.stats.barnard_exact (pooled, one-sided), Barnard's test
    # with the pooled z ordering maximized over the nuisance proportion; at a difference of 0
    # the MN score orders the tables the same way. scipy's table has the samples as columns.
    n1, n2, cells = tables
    ours = bs.unconditional_pvalues(n1, n2, "difference", 0.0, True)
    for x1, x2 in cells:
        ref = stats.barnard_exact(
            [[x2, x1], [n2 - x2, n1 - x1]], alternative="greater", pooled=True, n=200
        ).pvalue
        # both maximize over a grid of the nuisance proportion (ours 100 points, scipy 200)
        assert ours[x1, x2] == pytest.approx(ref, abs=2e-4), (x1, x2)


@pytest.mark.parametrize(
    "scale,margin", [("risk_ratio", math.log(0.8)), ("odds_ratio", math.log(0.5))]
)
def test_unconditional_test_keeps_alpha_on_the_null_boundary(scale, margin):
    # formula: an exact unconditional test's size is at most alpha at every nuisance value
    # (Suissa & Shuster 1985); checked at control proportions off the maximization grid.
    n1, n2, alpha = 25, 30, 0.05
    grid = bs.unconditional_reject_grid(n1, n2, scale, "noninferiority", margin, True, alpha)
    for p1 in (0.23, 0.5, 0.77):
        p2 = float(bs.at_bound(p1, margin, scale))
        assert bs.enumerated_power(grid, p1, p2) <= alpha + 1e-3
    # and it rejects no more often than the asymptotic MN test at the assumed proportions
    asym = bs.reject_grid(n1, n2, scale, "noninferiority", margin, True, alpha)
    assert bs.enumerated_power(grid, 0.7, 0.7) <= bs.enumerated_power(asym, 0.7, 0.7)


def test_unconditional_sample_size_is_the_first_n_reaching_the_target():
    b = body(scale="odds_ratio", margin=round(math.log(0.3), 4), analysis="mn_score_unconditional")
    b["effect"] = {"p_treatment": 0.85}
    b["assumptions"] = {"p_control": 0.85}
    b["alpha"] = 0.025
    record = answer(b)
    n = record["sample_size"]["per_group"][0]
    q = dict(load_question(b), find="power")
    assert DESIGN.power(q, [n, n], 0.025) >= 0.8 > DESIGN.power(q, [n - 1, n - 1], 0.025)
    assert "Suissa & Shuster" in record["method"]["reference"]


def test_unconditional_test_refuses_groups_above_its_limit():
    b = body(analysis="mn_score_unconditional", margin=math.log(0.9))
    with pytest.raises(Exception) as info:
        answer(b)
    assert "at most 100" in str(info.value)


def test_simulated_sample_size_on_the_risk_ratio_is_near_the_analytic_one():
    # The simulated search (posted bernoulli groups, started from Farrington-Manning's size on
    # the ratio scale) lands within 10% of the analytic MN size; common practice, no source.
    b = body(margin=math.log(0.85), alpha=0.025, analysis="mn_score")
    analytic = answer(b)["sample_size"]["per_group"][0]
    sim = copy.deepcopy(b)
    sim.pop("effect")
    sim["assumptions"] = {}
    sim.update(
        method="simulation",
        simulation={
            "replicates": 2000,
            "seed": 20261203,
            "data": {
                "control": {"family": "bernoulli", "p": 0.85},
                "treatment": {"family": "bernoulli", "p": 0.85},
            },
        },
    )
    record = answer(sim)
    assert record["sample_size"]["per_group"][0] == pytest.approx(analytic, rel=0.1)
