"""Group-sequential boundaries: classical constants, spending by definition, and simulation.

Sources:
- Pocock (1977), Biometrika 64:191, and O'Brien & Fleming (1979), Biometrics 35:549; both
  tabulated in Jennison & Turnbull (2000), Group Sequential Methods, ch. 2 (Tables 2.1, 2.3):
  two-sided alpha 0.05, K equally spaced looks (published).
- More cells of the same tables (K = 5 to 10 at alpha 0.05; K = 2 to 5 at alpha 0.01 and 0.10),
  Pocock's (1977, Table 1) nominal significance level of each repeated test, and the maximum
  sample size ratios R_P(K, alpha, beta) and R_B(K, alpha, beta) of Jennison & Turnbull (2000),
  Tables 2.2 and 2.4 (published: recalled, then reproduced here at the printed precision by
  recomputation; each assertion rounds to the printed digits).
- Lan & DeMets (1983), Biometrika 70:659: a spending design is defined by its cumulative alpha,
  checked here by an independent computation with scipy's multivariate normal (Z_k correlated
  √(t_i/t_j)), and by simulating the sequential test (cumulative sums of normal increments).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from service.engine import sequential as gs


@pytest.mark.parametrize(
    ("looks", "pocock", "obrien_fleming", "obf_first"),
    [
        # published: Pocock (1977); O'Brien & Fleming (1979); Jennison & Turnbull (2000), ch. 2
        (2, 2.178, 1.977, 2.797),
        (3, 2.289, 2.004, 3.471),
        (4, 2.361, 2.024, 4.049),
    ],
)
def test_classical_constants(looks, pocock, obrien_fleming, obf_first):
    assert gs.classical_constant(looks, 0.05, "pocock") == pytest.approx(pocock, abs=6e-4)
    c = gs.classical_constant(looks, 0.05, "obrien_fleming")
    assert c == pytest.approx(obrien_fleming, abs=6e-4)
    assert c * np.sqrt(looks) == pytest.approx(obf_first, abs=1.5e-3)  # C·√(K/k) at k = 1


# published: Jennison & Turnbull (2000), Table 2.1 (Pocock, C_P(K, alpha)) and Table 2.3
# (O'Brien & Fleming, C_B(K, alpha)), two-sided, K equally spaced looks, three decimals as printed
# (recalled, recomputed here: each value rounds to the printed one).
POCOCK_TABLE = {
    0.05: {5: 2.413, 6: 2.453, 7: 2.485, 8: 2.512, 9: 2.535, 10: 2.555},
    0.01: {2: 2.772, 3: 2.873, 4: 2.939, 5: 2.986},
    0.10: {2: 1.875, 3: 1.992, 4: 2.067, 5: 2.122},
}
OBRIEN_FLEMING_TABLE = {
    0.05: {5: 2.040, 6: 2.053, 7: 2.063, 8: 2.072, 9: 2.080, 10: 2.087},
    0.01: {2: 2.580, 3: 2.595, 4: 2.609, 5: 2.621},
    0.10: {2: 1.678, 3: 1.710, 4: 1.733, 5: 1.751},
}


@pytest.mark.parametrize(
    ("shape", "alpha", "looks", "printed"),
    [
        (shape, alpha, looks, value)
        for shape, table in (("pocock", POCOCK_TABLE), ("obrien_fleming", OBRIEN_FLEMING_TABLE))
        for alpha, row in table.items()
        for looks, value in row.items()
    ],
)
def test_classical_constants_at_the_printed_precision(shape, alpha, looks, printed):
    # published (recomputed): Jennison & Turnbull (2000), Tables 2.1 and 2.3
    assert round(gs.classical_constant(looks, alpha, shape), 3) == printed


@pytest.mark.parametrize(
    ("looks", "nominal"),
    [
        # published: Pocock (1977), Biometrika 64:191, Table 1: the nominal two-sided level of
        # each of N repeated tests, overall alpha 0.05 and 0.01 (recalled, recomputed here)
        ((2, 0.05), 0.0294),
        ((3, 0.05), 0.0221),
        ((4, 0.05), 0.0182),
        ((5, 0.05), 0.0158),
        ((10, 0.05), 0.0106),
        ((2, 0.01), 0.0056),
        ((3, 0.01), 0.0041),
        ((4, 0.01), 0.0033),
        ((5, 0.01), 0.0028),
        ((10, 0.01), 0.0018),
    ],
)
def test_pocock_nominal_significance_levels(looks, nominal):
    k, alpha = looks
    c = gs.classical_constant(k, alpha, "pocock")
    assert round(2.0 * stats.norm.sf(c), 4) == nominal


def _classical_ratio(looks: int, alpha: float, power: float, shape: str) -> float:
    """R = maximum information of the classical test / fixed information at the same power:
    the drift whose sequential power (numerical integration, ``gs.crossings``) is the target,
    over the fixed design's drift, squared (Jennison & Turnbull 2000, ch. 2)."""
    c = gs.classical_constant(looks, alpha, shape)
    t = np.asarray(gs.equal(looks))
    upper = [c] * looks if shape == "pocock" else list(c * np.sqrt(1.0 / t))

    def gap(drift: float) -> float:
        return sum(gs.crossings(t, None, upper, drift, 2)["efficacy"]) - power

    drift = optimize.brentq(gap, 0.5, 8.0, xtol=1e-12)
    return (drift / gs.fixed_drift(alpha, 2, power)) ** 2


@pytest.mark.parametrize(
    ("shape", "power", "ratios"),
    [
        # published: Jennison & Turnbull (2000), Table 2.2, R_P(K, 0.05, beta), K = 2..5
        ("pocock", 0.80, (1.110, 1.166, 1.202, 1.229)),
        ("pocock", 0.90, (1.100, 1.151, 1.183, 1.207)),
        # published: Jennison & Turnbull (2000), Table 2.4, R_B(K, 0.05, beta), K = 2..5
        ("obrien_fleming", 0.80, (1.008, 1.017, 1.024, 1.028)),
        ("obrien_fleming", 0.90, (1.007, 1.016, 1.022, 1.026)),
    ],
)
def test_maximum_sample_size_ratios(shape, power, ratios):
    # two-sided alpha 0.05; recalled, recomputed here: each ratio rounds to the printed one.
    # These check the integration under the alternative (power), not only the null boundaries.
    got = [round(_classical_ratio(k, 0.05, power, shape), 3) for k in (2, 3, 4, 5)]
    assert got == list(ratios)


def _mvn_continue(t, lower, upper, drift=0.0):
    """P(lower_j < Z_j < upper_j for every j ≤ k), k = 1..K, by scipy's multivariate normal.

    scipy integrates by randomized quasi-Monte Carlo: seeded so the check is the same every run,
    and with enough points that its error (under 6e-7 over 20 seeds at K = 4) sits well inside
    the tests' 2e-6 (400,000 points once missed it by 1e-7)."""
    t = np.asarray(t)
    out = []
    for k in range(1, len(t) + 1):
        tt = t[:k]
        cov = np.sqrt(np.minimum.outer(tt, tt) / np.maximum.outer(tt, tt))
        mean = drift * np.sqrt(tt)
        lo = np.maximum(np.asarray(lower[:k], float), -40.0)
        hi = np.minimum(np.asarray(upper[:k], float), 40.0)
        mvn = stats.multivariate_normal(
            mean, cov, maxpts=1_000_000, abseps=1e-8, releps=1e-8, seed=2026
        )
        out.append(mvn.cdf(hi, lower_limit=lo))
    return np.asarray(out)


@pytest.mark.parametrize(
    ("family", "gamma", "sides", "fractions"),
    [
        ("obrien_fleming", None, 2, (0.2, 0.4, 0.6, 0.8, 1.0)),
        ("pocock", None, 2, (1 / 3, 2 / 3, 1.0)),
        ("hwang_shih_decani", -4.0, 1, (0.25, 0.5, 0.75, 1.0)),
        ("hwang_shih_decani", 1.0, 1, (0.3, 0.7, 1.0)),
        ("obrien_fleming", None, 1, (0.5, 0.8, 1.0)),
    ],
)
def test_spending_matches_its_definition(family, gamma, sides, fractions):
    # Lan & DeMets (1983): P_H0(cross by look k) = alpha(t_k); by an independent computation.
    alpha = 0.05 if sides == 2 else 0.025
    t = np.asarray(fractions)
    upper = gs.efficacy_bounds(t, alpha, sides, family, gamma if gamma is not None else -4.0)
    lower = [-u for u in upper] if sides == 2 else [-np.inf] * len(t)
    crossed = 1.0 - _mvn_continue(t, lower, upper)
    spending = gs.alpha_spent(family, t, alpha, sides, gamma if gamma is not None else -4.0)
    np.testing.assert_allclose(crossed, spending, atol=2e-6)


def test_known_spending_boundaries():
    # from memory: the Lan-DeMets O'Brien-Fleming-type boundaries for K = 5 equal looks,
    # one-sided 0.025, as widely tabulated (4.877, 3.357, 2.680, 2.290, 2.031).
    upper = gs.efficacy_bounds(np.asarray(gs.equal(5)), 0.025, 1, "obrien_fleming", -4.0)
    np.testing.assert_allclose(upper, [4.877, 3.357, 2.680, 2.290, 2.031], atol=1e-3)


def test_one_look_is_the_fixed_design():
    # formula: with a single analysis the boundary is z_{1-alpha/2} and the inflation is 1
    plan = gs.Plan.of({"looks": 1})
    out = gs.solve(plan, 0.05, 2, 0.9)
    assert out["upper"][0] == pytest.approx(stats.norm.ppf(0.975), abs=1e-8)
    assert out["inflation"] == pytest.approx(1.0, abs=1e-6)


def test_futility_spends_beta_under_the_alternative():
    # beta spending (non-binding futility): P_H1(stop for futility by look k) = beta(t_k)
    plan = gs.Plan.of({"looks": 3, "futility_spending": "hwang_shih_decani", "futility_gamma": -2})
    solved = gs.solve(plan, 0.025, 1, 0.9)
    out = gs.evaluate(plan, 0.025, 1, solved["drift"], 0.1)
    assert out["power"] == pytest.approx(0.9, abs=1e-6)
    t = plan.t
    fut_by_look = np.cumsum(out["alternative"]["futility"])
    np.testing.assert_allclose(
        fut_by_look[:-1], gs.spent("hwang_shih_decani", t, 0.1, -2.0)[:-1], atol=1e-7
    )
    # independently: continuing past look 1 by the multivariate normal
    cont = _mvn_continue(t, out["lower"], out["upper"], drift=solved["drift"])
    stop1 = out["alternative"]["efficacy"][0] + out["alternative"]["futility"][0]
    assert 1.0 - cont[0] == pytest.approx(stop1, abs=2e-6)
    # non-binding: the efficacy boundaries are those of the design without futility
    plain = gs.efficacy_bounds(t, 0.025, 1, "obrien_fleming", -4.0)
    np.testing.assert_allclose(out["upper"], plain)


def _simulate(t, lower, upper, drift, sides, replicates, seed):
    """The sequential test on simulated statistics: cumulative sums of normal increments."""
    rng = np.random.default_rng(seed)
    dt = np.diff(np.concatenate([[0.0], t]))
    score = np.cumsum(rng.normal(drift * dt, np.sqrt(dt), size=(replicates, len(t))), axis=1)
    z = score / np.sqrt(t)
    upper = np.asarray(upper)
    lower = -upper if sides == 2 else np.asarray(lower if lower is not None else [-np.inf] * len(t))
    hit_up = z >= upper
    hit_down = z <= lower
    stop = hit_up | hit_down
    first = np.where(stop.any(axis=1), stop.argmax(axis=1), len(t))
    rows = np.arange(replicates)
    ended = first < len(t)
    up = np.zeros(len(t))
    down = np.zeros(len(t))
    np.add.at(up, first[ended], hit_up[rows[ended], first[ended]])
    np.add.at(down, first[ended], hit_down[rows[ended], first[ended]])
    return up / replicates, down / replicates


def _within(estimate, p, n, k=4.0):
    p = np.asarray(p, dtype=float)
    mcse = np.sqrt(np.maximum(p * (1 - p), 1e-12) / n)
    assert np.all(np.abs(np.asarray(estimate) - np.asarray(p)) <= k * mcse + 1e-9), (estimate, p)


@pytest.mark.parametrize(
    ("block", "sides", "alpha"),
    [
        ({"looks": 3}, 2, 0.05),
        ({"looks": 4, "efficacy_spending": "pocock"}, 2, 0.05),
        ({"looks": 3, "futility_spending": "obrien_fleming"}, 1, 0.025),
        (
            {
                "looks": 3,
                "information_fractions": [0.4, 0.7, 1.0],
                "efficacy_spending": "hwang_shih_decani",
                "efficacy_gamma": -2,
                "futility_spending": "pocock",
            },
            1,
            0.025,
        ),
    ],
)
def test_simulated_sequential_test_agrees(block, sides, alpha):
    plan = gs.Plan.of(block)
    solved = gs.solve(plan, alpha, sides, 0.85)
    out = gs.evaluate(plan, alpha, sides, solved["drift"], 0.15)
    replicates = 40_000
    for drift, probs, seed in ((0.0, out["null"], 1), (solved["drift"], out["alternative"], 2)):
        up, down = _simulate(plan.t, out["lower"], out["upper"], drift, sides, replicates, seed)
        _within(up, probs["efficacy"], replicates)
        if sides == 1:
            _within(down, probs["futility"], replicates)
        _within(up.sum(), sum(probs["efficacy"]), replicates)
    # the inflation factor delivers the target power: drift = √IF × the fixed design's drift
    assert np.sqrt(solved["inflation"]) * gs.fixed_drift(alpha, sides, 0.85) == pytest.approx(
        solved["drift"]
    )
    assert out["power"] == pytest.approx(0.85, abs=1e-6)


def test_expected_information_is_below_the_maximum():
    plan = gs.Plan.of({"looks": 5, "efficacy_spending": "pocock"})
    solved = gs.solve(plan, 0.05, 2, 0.9)
    out = gs.evaluate(plan, 0.05, 2, solved["drift"], 0.1)
    assert 0.5 < out["expected_fraction_alternative"] < out["expected_fraction_null"] < 1.0
    # the classical Pocock design costs more maximum information than O'Brien-Fleming's
    obf = gs.solve(gs.Plan.of({"looks": 5}), 0.05, 2, 0.9)
    assert solved["inflation"] > obf["inflation"] > 1.0
