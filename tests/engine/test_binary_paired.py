"""Binary outcome, paired: McNemar's test by Connor's (1987) formula and the exact conditional
test by enumeration, checked against the formula, statsmodels' McNemar test and scipy's binomial
sums; then simulated power against the analytic power within 4 MCSE."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.contingency_tables import mcnemar

from service.engine import QuestionError, exact_binomial
from service.schemas import QuestionInvalid, load_question
from tests.posted import PAIRED, posted, record_of


def question(**over) -> dict:
    return posted(PAIRED, **over)


def _connor(p10, p01, za, zb):
    psi, delta = p10 + p01, p10 - p01
    return (za * math.sqrt(psi) + zb * math.sqrt(psi - delta**2)) ** 2 / delta**2


@pytest.mark.parametrize(
    ("p10", "p01", "power", "raw"),
    [
        # formula: Connor (1987), Biometrics 43:207 (sizewise's reference table row):
        # ψ = .20, δ = .10, two-sided .05, power .90 → [1.959964·√.2 + 1.281552·√.19]²/.01
        (0.15, 0.05, 0.9, 205.96),
        # formula: the same with ψ = .30, δ = .10, power .80
        (0.20, 0.10, 0.8, 233.09),
    ],
)
def test_connor_sample_size(p10, p01, power, raw):
    want = _connor(p10, p01, stats.norm.ppf(0.975), stats.norm.ppf(power))
    assert want == pytest.approx(raw, abs=0.05)
    body = question(target_power=power)
    body["effect"] = {"p_treatment_only": p10}
    body["assumptions"] = {"p_control_only": p01}
    record = record_of(body)
    assert record["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(want, rel=1e-9)
    assert record["sample_size"]["per_group"] == [math.ceil(want)]


def test_marginal_rates_and_correlation_give_the_discordant_proportions():
    # formula: P(both) = p_t·p_c + ρ·√(p_t q_t p_c q_c) for two correlated yes/no outcomes
    pt, pc, rho = 0.30, 0.20, 0.40
    both = pt * pc + rho * math.sqrt(pt * (1 - pt) * pc * (1 - pc))
    p10, p01 = pt - both, pc - both
    body = question()
    body["effect"] = {"p_treatment": pt}
    body["assumptions"] = {"p_control": pc, "correlation": rho}
    record = record_of(body)
    assert record["method"]["derived"]["p_treatment_only"] == pytest.approx(p10, abs=1e-12)
    assert record["method"]["derived"]["p_control_only"] == pytest.approx(p01, abs=1e-12)
    want = _connor(p10, p01, stats.norm.ppf(0.975), stats.norm.ppf(0.9))
    assert record["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(want, rel=1e-9)


def test_an_impossible_correlation_names_its_field():
    body = question()
    body["effect"] = {"p_treatment": 0.9}
    body["assumptions"] = {"p_control": 0.1, "correlation": 0.9}
    with pytest.raises(QuestionError) as info:
        record_of(body)
    assert info.value.field == "assumptions.correlation"


def test_mixing_the_two_forms_is_refused():
    body = question()
    body["assumptions"] = {"p_control_only": 0.05, "correlation": 0.3}
    with pytest.raises(QuestionInvalid) as info:
        load_question(body)
    assert any("correlation" in k or "p_control_only" in k for k in info.value.errors)


# --- the exact conditional test -------------------------------------------------------------


def _brute_exact_power(n: int, p10: float, p01: float, alpha: float) -> float:
    """Σ over (d, x) of P(d)·P(x | d)·[statsmodels' exact McNemar p-value ≤ alpha] (library)."""
    psi = p10 + p01
    total = 0.0
    for d in range(1, n + 1):
        pd = stats.binom.pmf(d, n, psi)
        for x in range(d + 1):
            table = [[0, x], [d - x, 0]]
            if mcnemar(table, exact=True).pvalue <= alpha:
                total += pd * stats.binom.pmf(x, d, p10 / psi)
    return total


@pytest.mark.parametrize("n", [20, 40, 41])
def test_exact_power_matches_statsmodels_decisions(n):
    # library: statsmodels mcnemar(exact=True) decides each table (twice the smaller binomial tail)
    got = exact_binomial.conditional_power(np.array([n]), 0.25, 0.2 / 0.25, 0.05, 2, 1)[0]
    assert got == pytest.approx(_brute_exact_power(n, 0.2, 0.05, 0.05), abs=1e-12)


def test_exact_sample_size_reports_both_answers():
    body = question(analysis="exact_mcnemar", target_power=0.8)
    body["effect"] = {"p_treatment_only": 0.2}
    record = record_of(body)
    block = record["sample_size"]["details"]["exact_search"]
    # formula: the exact power curve recomputed for every n around the answer
    n = np.arange(2, block["checked_through"] + 1)
    curve = exact_binomial.conditional_power(n, 0.25, 0.8, 0.05, 2, 1)
    assert block["first_reaching"] == int(n[np.argmax(curve >= 0.8)])
    assert block["stays_above_from"] == int(n[curve < 0.8][-1] + 1)
    assert block["answer"] == "stays_above_from"
    assert record["sample_size"]["per_group"] == [block["stays_above_from"]]
    # the exact test needs at least Connor's normal-approximation answer here
    assert block["stays_above_from"] >= math.floor(block["normal_approximation"])


def test_detectable_treatment_only_proportion_reaches_the_target():
    body = question(find="effect", sample_size={"per_group": [206]})
    body.pop("effect")
    record = record_of(body)
    assert record["effect"]["field"] == "p_treatment_only"
    assert record["effect"]["value"] == pytest.approx(0.15, abs=1e-3)


# --- simulation against the analytic power ---------------------------------------------------


def _simulated(body: dict, replicates: int = 4000) -> dict:
    sim = copy.deepcopy(body)
    sim.update(method="simulation", simulation={"replicates": replicates, "seed": 20261202})
    return record_of(sim)


def test_simulated_exact_test_agrees_with_the_enumeration():
    body = question(find="power", analysis="exact_mcnemar", sample_size={"per_group": [60]})
    body["effect"] = {"p_treatment_only": 0.2}
    record = _simulated(body)
    power = record["power"]
    assert power["analytic"] == pytest.approx(
        exact_binomial.conditional_power(np.array([60]), 0.25, 0.8, 0.05, 2, 1)[0]
    )
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")


def test_simulated_mcnemar_agrees_with_connor():
    body = question(find="power", sample_size={"per_group": [206]})
    record = _simulated(body)
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
