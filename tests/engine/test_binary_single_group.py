"""Binary outcome, single group against a reference rate: the exact binomial test (power by
enumeration, the saw-tooth's two sample sizes) and the one-sample z test, checked against scipy
and the cited formula, then simulated power against the exact power within 4 MCSE."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from scipy import stats

from service.engine import exact_binomial
from service.schemas import QuestionInvalid, load_question
from tests.posted import SINGLE_RATE, posted, record_of


def question(**over) -> dict:
    return posted(SINGLE_RATE, **over)


def _brute_power(n: int, p: float, p0: float, alpha: float, two_sided: bool) -> float:
    """Exact power by summing binomial probabilities term by term (scipy.stats.binom.pmf)."""
    a = alpha / 2 if two_sided else alpha
    pmf0 = [stats.binom.pmf(k, n, p0) for k in range(n + 1)]
    pmf1 = [stats.binom.pmf(k, n, p) for k in range(n + 1)]
    upper = [sum(pmf0[k:]) for k in range(n + 1)]  # P0(X ≥ k)
    lower = [sum(pmf0[: k + 1]) for k in range(n + 1)]  # P0(X ≤ k)
    region = [upper[k] <= a or (two_sided and lower[k] <= a) for k in range(n + 1)]
    return sum(pr for pr, r in zip(pmf1, region, strict=True) if r)


# --- exact power (formula: the binomial sum, recomputed term by term with scipy.stats.binom) ----


@pytest.mark.parametrize("n", [10, 25, 56, 57, 58, 59, 100])
@pytest.mark.parametrize("two_sided", [False, True])
def test_exact_power_equals_the_binomial_sum(n, two_sided):
    # formula: power = Σ over the rejection region of Binomial(n, p) probabilities; the region
    # from the null tails (Clopper & Pearson 1934), recomputed here term by term.
    got = exact_binomial.power(np.array([n]), 0.35, 0.2, 0.05, 2 if two_sided else 1, 1)[0]
    assert got == pytest.approx(_brute_power(n, 0.35, 0.2, 0.05, two_sided), abs=1e-12)


@pytest.mark.parametrize("n", [8, 20, 57, 140])
@pytest.mark.parametrize("p0", [0.05, 0.2, 0.5, 0.9])
def test_decisions_match_scipy_binomtest(n, p0):
    # library: scipy.stats.binomtest p-values; one-sided "greater" at alpha, and the equal-tailed
    # two-sided test (twice the smaller one-sided p-value) at alpha.
    x = np.arange(n + 1)
    greater = np.array([stats.binomtest(int(k), n, p0, alternative="greater").pvalue for k in x])
    less = np.array([stats.binomtest(int(k), n, p0, alternative="less").pvalue for k in x])
    up = exact_binomial.reject(x, n, p0, 0.05, 1, 1)
    down = exact_binomial.reject(x, n, p0, 0.05, 1, -1)
    both = exact_binomial.reject(x, n, p0, 0.05, 2, 1)
    assert np.array_equal(up, greater <= 0.05)
    assert np.array_equal(down, less <= 0.05)
    assert np.array_equal(both, np.minimum(greater, less) <= 0.025)


def test_sample_size_reports_both_saw_tooth_answers():
    # formula: the exact power of every n from 1 to 120 by the term-by-term sum; p0 = 0.2 against
    # p = 0.35, one-sided 0.05, power 0.80. The curve first reaches 0.80 at 56, dips at 57 and 58.
    powers = {n: _brute_power(n, 0.35, 0.2, 0.05, False) for n in range(40, 121)}
    first = min(n for n, pw in powers.items() if pw >= 0.8)
    stays = 1 + max(n for n, pw in powers.items() if pw < 0.8)
    assert (first, stays) == (56, 59)
    record = record_of(question())
    block = record["sample_size"]["details"]["exact_search"]
    assert block["first_reaching"] == first
    assert block["stays_above_from"] == stays
    assert block["answer"] == "stays_above_from"
    assert block["dips_below_target"] == [57, 58]
    assert block["checked_through"] >= 2 * first
    assert record["sample_size"]["per_group"] == [stays]
    assert record["power"]["estimate"] == pytest.approx(powers[stays], abs=1e-12)


def test_two_sided_sample_size_matches_the_brute_force_curve():
    # formula: the same curve, two-sided (equal tails at 0.025), p0 = 0.5 against p = 0.7, 90%.
    body = question(alternative="two-sided", target_power=0.9)
    body["effect"] = {"p": 0.7}
    body["assumptions"] = {"p_null": 0.5}
    powers = {n: _brute_power(n, 0.7, 0.5, 0.05, True) for n in range(20, 160)}
    block = record_of(body)["sample_size"]["details"]["exact_search"]
    assert block["first_reaching"] == min(n for n, pw in powers.items() if pw >= 0.9)
    assert block["stays_above_from"] == 1 + max(n for n, pw in powers.items() if pw < 0.9)


def test_a_lower_rate_is_tested_in_the_lower_tail():
    # formula: mirror image — p0 = 0.8 against p = 0.65 is the 0.2 against 0.35 question turned
    # around, so both n's are the same.
    body = question()
    body["effect"] = {"p": 0.65}
    body["assumptions"] = {"p_null": 0.8}
    block = record_of(body)["sample_size"]["details"]["exact_search"]
    assert (block["first_reaching"], block["stays_above_from"]) == (56, 59)


# --- z test (formula: Lachin 1981, Controlled Clin Trials 2:93, eq. for one proportion) ---------


def test_z_test_sample_size_formula():
    # formula: n = [z.95·√(.2·.8) + z.80·√(.35·.65)]² / .15² = 49.88 → 50 (Lachin 1981)
    za, zb = stats.norm.ppf(0.95), stats.norm.ppf(0.8)
    raw = (za * math.sqrt(0.16) + zb * math.sqrt(0.35 * 0.65)) ** 2 / 0.15**2
    assert raw == pytest.approx(49.878, abs=1e-3)
    record = record_of(question(analysis="z_test"))
    base = record["sample_size"]["steps"][0]
    assert base["per_group_raw"][0] == pytest.approx(raw, rel=1e-9)
    assert record["sample_size"]["per_group"] == [50]
    assert "details" not in record["sample_size"]


def test_z_test_power_is_the_normal_approximation():
    # formula: power = Φ((|p − p0|√n − z_α/2·√(p0 q0)) / √(p q)) + the other tail, n = 80, two-sided
    body = question(find="power", alternative="two-sided", analysis="z_test")
    body["sample_size"] = {"per_group": [80]}
    za = stats.norm.ppf(0.975)
    s0, s1, d = math.sqrt(0.16), math.sqrt(0.35 * 0.65), 0.15
    want = stats.norm.cdf((d * math.sqrt(80) - za * s0) / s1) + stats.norm.cdf(
        (-d * math.sqrt(80) - za * s0) / s1
    )
    assert record_of(body)["power"]["estimate"] == pytest.approx(want, rel=1e-12)


def test_detectable_rate_reaches_the_target_exactly():
    body = question(find="effect")
    body.pop("effect")
    body["sample_size"] = {"per_group": [59]}
    record = record_of(body)
    p = record["effect"]["value"]
    assert record["effect"]["field"] == "p"
    # formula: the exact power at the solved rate is the target (term-by-term sum)
    assert _brute_power(59, p, 0.2, 0.05, False) == pytest.approx(0.8, abs=1e-6)
    assert 0.3 < p < 0.36


def test_equal_rates_are_refused_on_the_effect_field():
    body = question()
    body["effect"] = {"p": 0.2}
    with pytest.raises(Exception) as info:
        record_of(body)
    assert "effect.p" in str(info.value)


def test_a_rate_outside_zero_and_one_is_refused():
    body = question()
    body["assumptions"] = {"p_null": 1.2}
    with pytest.raises(QuestionInvalid) as info:
        load_question(body)
    assert "assumptions.p_null" in info.value.errors


def test_exact_curve_is_vectorized_over_n():
    # common practice, no source: one call evaluates n = 1 … 2000 (no Python loop over n)
    n = np.arange(1, 2001)
    pw = exact_binomial.power(n, 0.25, 0.2, 0.05, 2, 1)
    assert pw.shape == (2000,)
    assert pw[1999] == pytest.approx(_brute_power(2000, 0.25, 0.2, 0.05, True), abs=1e-9)


# --- simulation against the exact power ---------------------------------------------------------


def _simulated(body: dict, replicates: int = 4000) -> dict:
    sim = copy.deepcopy(body)
    sim.update(method="simulation", simulation={"replicates": replicates, "seed": 20261202})
    return record_of(sim)


@pytest.mark.parametrize("analysis", ["exact_binomial", "z_test"])
def test_simulated_power_agrees_with_the_analytic(analysis):
    body = question(find="power", analysis=analysis, alternative="two-sided")
    body["sample_size"] = {"per_group": [57]}
    record = _simulated(body)
    power = record["power"]
    if analysis == "exact_binomial":
        assert power["analytic"] == pytest.approx(_brute_power(57, 0.35, 0.2, 0.05, True))
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")


def test_simulated_z_test_rejects_as_its_enumerated_rule():
    # formula: the z rule's own rejection probability, enumerated over the counts, is what the
    # simulated kernel estimates (the normal approximation only approximates it).
    n, p0, p = 57, 0.2, 0.35
    x = np.arange(n + 1)
    zstat = (x / n - p0) / math.sqrt(p0 * (1 - p0) / n)
    region = np.abs(zstat) > stats.norm.ppf(0.975)
    exact_rate = float(stats.binom.pmf(x, n, p)[region].sum())
    body = question(find="power", analysis="z_test", alternative="two-sided")
    body["sample_size"] = {"per_group": [n]}
    power = _simulated(body)["power"]
    assert abs(power["estimate"] - exact_rate) <= 4 * power["mcse"], (power, exact_rate)
