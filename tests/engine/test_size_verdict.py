"""The simulated type I error is judged against the alpha the test used: holds, conservative or
exceeds, and only a test that exceeds its level is a warning."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from service.engine import compute, explore, simulate
from service.engine.search import wilson
from tests.engine.questions import make_q


def fisher_size_exact(p: float, n: int, alpha: float = 0.05) -> float:
    """Exact size of the two-sided Fisher test at common p, n per group: exact enumeration.

    Every table (c1, c2) is weighted by its binomial probability; its p-value sums the
    hypergeometric probabilities (scipy.stats.hypergeom) of the tables with the same margin
    that are no more likely than it (scipy.stats.fisher_exact's rule, relative tolerance 1e-7).
    """
    c = np.arange(n + 1)
    w = stats.binom.pmf(c, n, p)
    size = 0.0
    for s in range(2 * n + 1):
        support = np.arange(max(0, s - n), min(s, n) + 1)  # c2 given c1 + c2 = s
        pmf = stats.hypergeom.pmf(support, 2 * n, s, n)
        pvals = np.array([pmf[pmf <= q * (1 + 1e-7)].sum() for q in pmf])
        size += float((w[s - support] * w[support])[pvals <= alpha].sum())
    return size


def test_exact_enumeration_agrees_with_scipy_fisher_exact_on_some_tables():
    n = 40
    for c1, c2 in [(5, 14), (12, 12), (3, 11), (20, 9)]:
        s = c1 + c2
        support = np.arange(max(0, s - n), min(s, n) + 1)
        pmf = stats.hypergeom.pmf(support, 2 * n, s, n)
        mine = pmf[pmf <= pmf[c2 - support[0]] * (1 + 1e-7)].sum()
        ref = stats.fisher_exact([[c1, n - c1], [c2, n - c2]])[1]
        assert mine == pytest.approx(ref, rel=1e-9)


def test_fisher_below_alpha_is_conservative_not_a_failure():
    exact = fisher_size_exact(0.3, 40)
    assert exact == pytest.approx(0.0282, abs=5e-4)  # below 0.05: the test is conservative
    q = make_q(
        "binary",
        "two_groups",
        effect={"p_treatment": 0.6},
        assumptions={"p_control": 0.3},
        per_group=(40, 40),
        analysis="fisher_exact",
        simulation={"replicates": 4000, "seed": 11},
    )
    record = compute(q)
    t1 = record["type_i_error"]
    lo, hi = t1["ci95"]
    assert lo <= exact <= hi  # the simulated size agrees with the exact enumeration
    assert t1["verdict"] == "conservative"
    assert set(t1) == {"estimate", "mcse", "ci95", "replicates", "alpha", "verdict", "null_model"}
    assert not any("type I error" in w for w in record["warnings"])


@pytest.mark.parametrize(
    "rejections,alpha,verdict",
    [
        (200, 0.05, "holds"),  # 0.05 exactly
        (112, 0.05, "conservative"),  # 0.028: upper bound 0.0336
        (180, 0.05, "holds"),  # 0.045: interval 0.039–0.052 covers 0.05
        (260, 0.05, "exceeds"),  # 0.065: lower bound 0.058
        (112, 0.025, "holds"),  # the same 0.028 against a per-comparison 0.025
    ],
)
def test_verdict_uses_the_wilson_interval_against_alpha(rejections, alpha, verdict):
    assert simulate.size_verdict(wilson(rejections, 4000), alpha) == verdict


def test_a_liberal_test_exceeds_and_warns():
    # common practice, no source: the pooled t test with the larger SD in the smaller arm is
    # liberal; SD 1 vs 2 with 60/20 per group rejects a true null far above 0.05.
    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 2.0},
        per_group=(60, 20),
        analysis="pooled_t",
        simulation={"replicates": 4000, "seed": 3},
    )
    record = compute(q)
    assert record["type_i_error"]["verdict"] == "exceeds"
    assert record["type_i_error"]["ci95"][0] > 0.05
    assert any("exceeds alpha" in w for w in record["warnings"])


def test_robustness_panel_judges_sizes_against_the_per_comparison_alpha():
    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        adjustments={"comparisons": 2},
    )
    panel = explore.robustness(q, [86, 86], replicates=2000, seed=7)
    assert panel["alpha"] == 0.05 and panel["alpha_per_comparison"] == 0.025
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    t1 = normal["type_i_error"]
    assert t1["alpha"] == 0.025
    # A t test on normal data holds its level (Student 1908): within 4 MCSE of 0.025, not 0.05.
    assert abs(t1["estimate"] - 0.025) <= 4 * (0.025 * 0.975 / 2000) ** 0.5
    assert t1["verdict"] == "holds"
    assert t1["ci95"][1] < 0.05  # against the overall 0.05 it would have been flagged
