"""One-way ANOVA with unequal group sizes: λ from the actual sizes, f = 0 gives alpha."""

from __future__ import annotations

import math

import pytest
from scipy import stats
from statsmodels.stats.power import FTestAnovaPower

from service.engine.compute import compute
from service.engine.designs import get
from tests.engine.questions import make_q

ANOVA = get("continuous", "k_groups")


def means_blocks(means, sd):
    """The effect and assumptions blocks as the investigator posts them (group means and SD)."""
    return {"effect": {"group_means": list(means)}, "assumptions": {"sd": sd}}


def ncf_power(means, sd, sizes, alpha=0.05):
    """formula: noncentral F, λ = Σnᵢ(μᵢ−μ̄_w)²/σ², μ̄_w the size-weighted mean (direct scipy)."""
    total = sum(sizes)
    grand = sum(n * m for n, m in zip(sizes, means, strict=True)) / total
    lam = sum(n * (m - grand) ** 2 for n, m in zip(sizes, means, strict=True)) / sd**2
    k = len(sizes)
    crit = stats.f.isf(alpha, k - 1, total - k)
    return float(stats.ncf.sf(crit, k - 1, total - k, lam))


@pytest.mark.parametrize(
    ("means", "sizes"),
    [
        ([0.0, 0.0, 1.0], [40, 10, 10]),  # the example of the report: 0.71, not 0.90
        ([0.0, 0.0, 1.0], [10, 10, 40]),
        ([0.0, 0.5, 1.0, 0.2], [12, 30, 7, 25]),
        ([1.0, 2.0], [15, 45]),
    ],
)
def test_unequal_power_uses_the_actual_sizes(means, sizes):
    q = make_q("continuous", "k_groups", **means_blocks(means, 1.0), per_group=sizes)
    expected = ncf_power(means, 1.0, sizes)
    got = compute(q)["power"]["estimate"]
    assert got == pytest.approx(expected, abs=1e-9)


def test_issue_example_is_071():
    # formula: noncentral F, λ = Σnᵢ(μᵢ−μ̄_w)²/σ²: λ = 40·0.04 + 10·0.04 + 10·0.64 = 8.33…
    q = make_q("continuous", "k_groups", **means_blocks([0, 0, 1], 1.0), per_group=[40, 10, 10])
    assert compute(q)["power"]["estimate"] == pytest.approx(0.71, abs=0.01)


def test_equal_sizes_unchanged_against_statsmodels():
    # statsmodels FTestAnovaPower (equal n): λ = f²·N with f from divisor k
    means, n = [0.0, 0.3, 0.6], 25
    f = math.sqrt(sum((m - 0.3) ** 2 for m in means) / 3)
    q = make_q("continuous", "k_groups", **means_blocks(means, 1.0), per_group=[n] * 3)
    ref = FTestAnovaPower().power(f, 3 * n, 0.05, k_groups=3)
    assert compute(q)["power"]["estimate"] == pytest.approx(ref, abs=1e-9)


def test_cohens_f_alone_is_the_size_weighted_definition():
    # formula: Cohen (1988) §8.2 with unequal n: λ = f²·N, f the size-weighted SD of the means
    sizes, f = [40, 10, 10], 0.3
    q = make_q(
        "continuous",
        "k_groups",
        effect={"cohens_f": f},
        assumptions={"group_count": 3},
        per_group=sizes,
    )
    crit = stats.f.isf(0.05, 2, 57)
    assert compute(q)["power"]["estimate"] == pytest.approx(
        float(stats.ncf.sf(crit, 2, 57, f * f * 60)), abs=1e-12
    )
    note = " ".join(compute(q)["method"]["notes"])
    assert "size-weighted" in note


@pytest.mark.parametrize("sizes", [[20, 20, 20], [40, 10, 10]])
@pytest.mark.parametrize("alpha", [0.05, 0.01])
def test_zero_effect_power_is_alpha(sizes, alpha):
    # exact: at λ = 0 the statistic is central F, so the rejection rate is alpha
    q = make_q(
        "continuous",
        "k_groups",
        effect={"cohens_f": 0.0},
        assumptions={"group_count": 3},
        per_group=sizes,
        alpha=alpha,
    )
    assert ANOVA.power(q, sizes, alpha) == alpha
    q = make_q(
        "continuous", "k_groups", **means_blocks([1, 1, 1], 2.0), per_group=sizes, alpha=alpha
    )
    assert ANOVA.power(q, sizes, alpha) == alpha


def test_solve_effect_unequal_sizes_reaches_the_target():
    # formula: noncentral F at λ = f²·N; the solved f gives the target power exactly
    sizes = [40, 10, 10]
    q = make_q("continuous", "k_groups", find="effect", per_group=sizes)
    f = ANOVA.solve_effect(q, [float(n) for n in sizes], 0.05)["value"]
    crit = stats.f.isf(0.05, 2, 57)
    assert float(stats.ncf.sf(crit, 2, 57, f * f * 60)) == pytest.approx(0.8, abs=1e-6)


@pytest.mark.parametrize(
    ("means", "sizes"),
    [([0.0, 0.0, 1.0], [40, 10, 10]), ([0.0, 0.4, 0.8], [8, 30, 12]), ([0, 0, 0], [40, 10, 10])],
)
def test_simulation_agrees_with_unequal_formula(means, sizes):
    # the engine's simulation against the noncentral F formula, within 4 MCSE
    q = make_q(
        "continuous",
        "k_groups",
        **means_blocks(means, 1.0),
        per_group=sizes,
        simulation={"replicates": 4000},
    )
    rec = compute(q)
    est = rec["power"]
    exact = ncf_power(means, 1.0, sizes) if any(means) else 0.05
    assert abs(est["estimate"] - exact) <= 4 * max(est["mcse"], 1e-3)
    assert est["analytic"] == pytest.approx(exact, abs=1e-9)


def test_simulation_from_cohens_f_alone_uses_the_same_definition():
    # formula: noncentral F, λ = f²·N (size-weighted f); the simulated power agrees within 4 MCSE
    sizes, f = [40, 10, 10], 0.35
    q = make_q(
        "continuous",
        "k_groups",
        effect={"cohens_f": f},
        assumptions={"group_count": 3},
        per_group=sizes,
        simulation={"replicates": 4000},
    )
    est = compute(q)["power"]
    crit = stats.f.isf(0.05, 2, 57)
    exact = float(stats.ncf.sf(crit, 2, 57, f * f * 60))
    assert est["analytic"] == pytest.approx(exact, abs=1e-12)
    assert abs(est["estimate"] - exact) <= 4 * est["mcse"]
