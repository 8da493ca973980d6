"""One-sided tests look where the assumed effect points, analytically and by simulation.

Every cell with a one-sided option is run with an effect of each sign. The simulated power is
checked against an exact computation made here with scipy (noncentral t; full enumeration of
the binomial outcomes for the z and Fisher tests) or, where no exact value is at hand, against
the cell's published formula (Noether 1987, Fisher z, Schoenfeld 1983), within 4 MCSE.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from service.engine import compute, direction
from service.engine.designs import get
from service.engine.plan import make_plan
from tests.engine.questions import make_q

TWO_GROUPS = get("continuous", "two_groups")

REPS = 4000
SEED = 5


def power_q(cell: tuple, values: dict, per_group, analysis: str | None = None, **top) -> dict:
    sim = {"replicates": REPS, "seed": SEED}
    if analysis:
        top["analysis"] = analysis
    return make_q(
        *cell, values=values, per_group=per_group, alternative="one-sided", simulation=sim, **top
    )


def within(estimate: float, reference: float, reps: int = REPS, k: float = 4.0) -> bool:
    """True when ``reference`` lies within k Monte Carlo standard errors of ``estimate``."""
    return abs(estimate - reference) <= k * math.sqrt(reference * (1 - reference) / reps)


# --- exact references, computed here --------------------------------------------------------


def t_one_sided(ncp: float, df: float, alpha: float = 0.05) -> float:
    """Exact one-sided t power towards the sign of ``ncp`` (scipy.stats.nct)."""
    tc = stats.t.isf(alpha, df)
    return float(stats.nct.sf(tc, df, ncp) if ncp > 0 else stats.nct.cdf(-tc, df, ncp))


def _tables(p1: float, n1: int, p2: float, n2: int):
    """Every 2×2 outcome (c1, c2) with its binomial probability: exact enumeration."""
    c1, c2 = np.meshgrid(np.arange(n1 + 1), np.arange(n2 + 1), indexing="ij")
    w = np.outer(
        stats.binom.pmf(np.arange(n1 + 1), n1, p1), stats.binom.pmf(np.arange(n2 + 1), n2, p2)
    )
    return c1.ravel(), c2.ravel(), w.ravel()


def z_one_sided_exact(p1, n1, p2, n2, sign: int, alpha: float = 0.05) -> float:
    """Exact power of the one-sided pooled z test towards ``sign``, by enumeration."""
    c1, c2, w = _tables(p1, n1, p2, n2)
    pbar = (c1 + c2) / (n1 + n2)
    se = np.sqrt(pbar * (1 - pbar) * (1 / n1 + 1 / n2))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (c2 / n2 - c1 / n1) / se
    return float(w[np.nan_to_num(sign * z) > stats.norm.isf(alpha)].sum())


def fisher_one_sided_exact(p1, n1, p2, n2, sign: int, alpha: float = 0.05) -> float:
    """Exact power of the one-sided Fisher test (hypergeometric tail of c2 given c1 + c2)."""
    c1, c2, w = _tables(p1, n1, p2, n2)
    s = c1 + c2
    if sign > 0:  # P(C2 ≥ c2 | s)
        p = stats.hypergeom.sf(c2 - 1, n1 + n2, s, n2)
    else:  # P(C2 ≤ c2 | s)
        p = stats.hypergeom.cdf(c2, n1 + n2, s, n2)
    return float(w[p <= alpha].sum())


# --- the helper -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    "cell,values,sign",
    [
        (("continuous", "two_groups"), {"difference": -5.0}, -1),
        (("continuous", "two_groups"), {"difference": 5.0}, 1),
        (("continuous", "single_group"), {"difference": -1.0}, -1),
        (("continuous", "paired"), {"difference": 2.0}, 1),
        (("binary", "two_groups"), {"p_control": 0.10, "p_treatment": 0.05}, -1),
        (("association", "single_group"), {"r": 0.1, "r_null": 0.3}, -1),
        (("ordinal", "two_groups"), {"prob_superiority": 0.38}, -1),
        (("time_to_event", "two_groups"), {"hazard_ratio": 0.7}, 1),  # longer times: "higher"
        (("time_to_event", "two_groups"), {"hazard_ratio": 1.4}, -1),
    ],
)
def test_direction_follows_the_assumed_effect_whatever_higher_is_better_says(cell, values, sign):
    for better in (True, False):
        q = make_q(
            *cell, values=values, alternative="one-sided", hypothesis={"higher_is_better": better}
        )
        assert direction.one_sided(q, get(*cell)) == sign


def test_direction_without_an_effect_or_under_a_margin_comes_from_higher_is_better():
    q = make_q(
        "continuous", "two_groups", find="effect", per_group=(50, 50), alternative="one-sided"
    )
    assert direction.one_sided(q, TWO_GROUPS) == 1
    q["hypothesis"]["higher_is_better"] = False
    assert direction.one_sided(q, TWO_GROUPS) == -1
    ni = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.3},
        hypothesis={"aim": "noninferiority", "margin": 0.5, "higher_is_better": False},
    )
    assert direction.one_sided(ni, TWO_GROUPS) == -1


# --- simulated against exact or formula power, both signs -----------------------------------

SD = {"sd_control": 12.0, "sd_treatment": 12.0}


@pytest.mark.parametrize("analysis", ["pooled_t", "welch_t"])
@pytest.mark.parametrize("difference", [5.0, -5.0])
def test_two_groups_one_sided_power_matches_noncentral_t_both_signs(analysis, difference):
    # The blood-pressure example: difference −5, SD 12, 100 per group; exact one-sided t ≈ 0.90.
    q = power_q(
        ("continuous", "two_groups"), {"difference": difference, **SD}, (100, 100), analysis
    )
    power = compute(q)["power"]
    exact = t_one_sided(difference / (12.0 * math.sqrt(2 / 100)), 198)
    assert exact == pytest.approx(0.9017, abs=1e-4)
    assert power["analytic"] == pytest.approx(exact, abs=1e-6)
    assert within(power["estimate"], exact)


@pytest.mark.parametrize(
    "cell,values,n",
    [
        (("continuous", "single_group"), {"difference": 5.0, "sd": 15.0}, 60),
        (("continuous", "single_group"), {"difference": -5.0, "sd": 15.0}, 60),
        (("continuous", "paired"), {"difference": 1.0, "sd_difference": 2.5}, 40),
        (("continuous", "paired"), {"difference": -1.0, "sd_difference": 2.5}, 40),
    ],
)
def test_one_sample_one_sided_power_matches_noncentral_t_both_signs(cell, values, n):
    q = power_q(cell, values, (n,))
    power = compute(q)["power"]
    sd = values.get("sd", values.get("sd_difference"))
    exact = t_one_sided(values["difference"] * math.sqrt(n) / sd, n - 1)
    assert power["analytic"] == pytest.approx(exact, abs=1e-6)
    assert within(power["estimate"], exact)


@pytest.mark.parametrize("p1,p2", [(0.05, 0.10), (0.10, 0.05)])
def test_binary_two_groups_z_one_sided_matches_exact_enumeration_both_signs(p1, p2):
    q = power_q(
        ("binary", "two_groups"), {"p_control": p1, "p_treatment": p2}, (400, 400), "pooled_z"
    )
    power = compute(q)["power"]
    exact = z_one_sided_exact(p1, 400, p2, 400, 1 if p2 > p1 else -1)
    assert within(power["estimate"], exact)
    # Fleiss, Levin & Paik (2003), ch. 4 pooled-variance formula: the analytic answer.
    assert within(power["analytic"], exact)


@pytest.mark.parametrize("p1,p2", [(0.05, 0.15), (0.15, 0.05)])
def test_fisher_one_sided_matches_exact_enumeration_both_signs(p1, p2):
    q = power_q(
        ("binary", "two_groups"), {"p_control": p1, "p_treatment": p2}, (150, 150), "fisher_exact"
    )
    power = compute(q)["power"]
    exact = fisher_one_sided_exact(p1, 150, p2, 150, 1 if p2 > p1 else -1)
    assert exact > 0.7
    assert within(power["estimate"], exact)


@pytest.mark.parametrize(
    "cell,values,per_group",
    [
        # Noether (1987), JASA 82:645
        (("ordinal", "two_groups"), {"prob_superiority": 0.62}, (100, 100)),
        (("ordinal", "two_groups"), {"prob_superiority": 0.38}, (100, 100)),
        # Fisher z (Cohen 1988, ch. 3); the simulation applies the exact t test of ρ = 0
        (("association", "single_group"), {"r": 0.3}, (70,)),
        (("association", "single_group"), {"r": -0.3}, (70,)),
        (("association", "single_group"), {"r": 0.5, "r_null": 0.3}, (120,)),
        (("association", "single_group"), {"r": 0.1, "r_null": 0.3}, (120,)),
        # Schoenfeld (1983), Biometrics 39:499, with the exponential P(event) of the cell
        (("time_to_event", "two_groups"), {"hazard_ratio": 0.7}, (150, 150)),
        (("time_to_event", "two_groups"), {"hazard_ratio": 1 / 0.7}, (150, 150)),
    ],
)
def test_one_sided_power_matches_the_formula_both_signs(cell, values, per_group):
    power = compute(power_q(cell, values, per_group))["power"]
    assert power["analytic"] > 0.7
    assert within(power["estimate"], power["analytic"])


def test_one_sided_search_for_a_reduction_finds_the_analytic_size():
    # Two proportions 0.10 → 0.05, one-sided: the search used to stop at "power stays below".
    q = make_q(
        "binary",
        "two_groups",
        effect={"p_treatment": 0.05},
        assumptions={"p_control": 0.10},
        alternative="one-sided",
        simulation={"replicates": 2000, "search_replicates": 1000, "seed": SEED},
    )
    analytic = compute(dict(q, method="analytic", simulation=None))["sample_size"]["per_group"][0]
    record = compute(q)
    assert abs(record["sample_size"]["per_group"][0] - analytic) <= 0.15 * analytic
    assert record["power"]["estimate"] > 0.75


def test_a_data_model_sets_the_direction_of_the_simulated_test():
    # Normal groups 120 vs 115, SD 12: a reduction of 5 given only by the data model.
    groups = {
        "control": {"family": "normal", "mean": 120.0, "sd": 12.0},
        "treatment": {"family": "normal", "mean": 115.0, "sd": 12.0},
    }
    q = power_q(("continuous", "two_groups"), {"difference": -5.0, **SD}, (100, 100), "welch_t")
    q["simulation"]["data"] = groups
    assert make_plan(q, 0.05).rule.direction == -1
    exact = t_one_sided(-5.0 / (12.0 * math.sqrt(2 / 100)), 198)
    assert within(compute(q)["power"]["estimate"], exact)


def test_survival_effect_search_looks_above_one_when_shorter_times_are_better():
    q = make_q(
        "time_to_event",
        "two_groups",
        find="effect",
        per_group=(150, 150),
        alternative="one-sided",
        hypothesis={"higher_is_better": False},
        target_power=0.8,
    )
    analytic = compute(q)["effect"]["value"]
    assert analytic > 1
    # The simulated log-rank test at that hazard ratio, looking the same way, has the power.
    sim = make_q(
        "time_to_event",
        "two_groups",
        effect={"hazard_ratio": analytic},
        per_group=(150, 150),
        alternative="one-sided",
        hypothesis={"higher_is_better": False},
        simulation={"replicates": REPS, "seed": SEED},
    )
    assert make_plan(sim, 0.05).rule.direction == 1  # z > 0: more treatment events
    assert within(compute(sim)["power"]["estimate"], 0.8)
