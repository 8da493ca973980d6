"""Each vectorized test kernel against scipy.stats / statsmodels on small random data sets.

Source of every check: the general-purpose library named in the test (recomputed there, one
replicate at a time); the kernels must give the same statistics and p-values.
"""

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats import proportion as sm_proportion
from statsmodels.stats.weightstats import ttost_ind

from service.engine import vectests as vt

RNG = np.random.default_rng(20240611)
TWO = {"aim": "superiority", "alternative": "two-sided", "direction": 1, "margin": None}
ALTERNATIVES = [
    ("two-sided", TWO),
    ("greater", {"aim": "superiority", "alternative": "one-sided", "direction": 1, "margin": None}),
    ("less", {"aim": "superiority", "alternative": "one-sided", "direction": -1, "margin": None}),
]


def _rows(rows, n, shift=0.0, ties=False):
    x = RNG.normal(shift, 1.0, (rows, n))
    return np.round(x, 1) if ties else x


@pytest.mark.parametrize("alternative,rule", ALTERNATIVES)
@pytest.mark.parametrize("equal_var", [True, False])
def test_two_sample_t_matches_scipy(alternative, rule, equal_var):
    # recomputed: scipy.stats.ttest_ind (equal_var=True Student, False Welch)
    x, y = _rows(8, 9), _rows(8, 13, 0.4) * 1.7
    mx, vx = vt.row_moments(x)
    my, vy = vt.row_moments(y)
    est, se, df = vt.two_sample_t(mx, vx, 9, my, vy, 13, equal_var=equal_var)
    ref = stats.ttest_ind(y, x, axis=1, equal_var=equal_var, alternative=alternative)
    np.testing.assert_allclose(est / se, ref.statistic, rtol=1e-10)
    np.testing.assert_allclose(vt.pvalue(est, se, df, rule), ref.pvalue, rtol=1e-8)
    assert np.array_equal(vt.decide(est, se, df, 0.05, rule), ref.pvalue < 0.05)


def test_one_sample_t_matches_scipy():
    # recomputed: scipy.stats.ttest_1samp
    d = _rows(10, 12, 0.3)
    m, v = vt.row_moments(d)
    est, se, df = vt.one_sample_t(m, v, 12)
    ref = stats.ttest_1samp(d, 0.0, axis=1)
    np.testing.assert_allclose(vt.pvalue(est, se, df, TWO), ref.pvalue, rtol=1e-8)


def test_centred_moments_keep_digits_far_from_zero():
    # recomputed: numpy's two-pass var(ddof=1) on data with mean 1e6 and SD 1
    x = _rows(5, 40) + 1e6
    mean, var = vt.row_moments(x, center=1e6)
    np.testing.assert_allclose(var, x.var(axis=1, ddof=1), rtol=1e-9)
    np.testing.assert_allclose(mean, x.mean(axis=1), rtol=1e-14)


def test_tost_matches_statsmodels():
    # recomputed: statsmodels ttost_ind (pooled variance), p = max of the two one-sided p
    x, y = _rows(6, 20), _rows(6, 20, 0.1)
    mx, vx = vt.row_moments(x)
    my, vy = vt.row_moments(y)
    est, se, df = vt.two_sample_t(mx, vx, 20, my, vy, 20, equal_var=True)
    rule = {"aim": "equivalence", "alternative": "one-sided", "direction": 1, "margin": 0.8}
    ours = vt.pvalue(est, se, df, rule)
    ref = [ttost_ind(y[i], x[i], -0.8, 0.8, usevar="pooled")[0] for i in range(6)]
    np.testing.assert_allclose(ours, ref, rtol=1e-8)


def test_noninferiority_shift_matches_scipy():
    # recomputed: scipy.stats.ttest_ind on treatment − margin, alternative "greater"
    x, y = _rows(6, 15), _rows(6, 15, 0.2)
    mx, vx = vt.row_moments(x)
    my, vy = vt.row_moments(y)
    est, se, df = vt.two_sample_t(mx, vx, 15, my, vy, 15, equal_var=True)
    rule = {"aim": "noninferiority", "alternative": "one-sided", "direction": 1, "margin": -0.5}
    ref = stats.ttest_ind(y + 0.5, x, axis=1, alternative="greater")
    np.testing.assert_allclose(vt.pvalue(est, se, df, rule), ref.pvalue, rtol=1e-8)


@pytest.mark.parametrize("ties", [False, True])
@pytest.mark.parametrize("alternative,rule", ALTERNATIVES)
def test_rank_sum_matches_mannwhitneyu(alternative, rule, ties):
    # recomputed: scipy.stats.mannwhitneyu(y, x, method="asymptotic", use_continuity=False)
    x, y = _rows(10, 11, ties=ties), _rows(10, 14, 0.5, ties=ties)
    z = vt.rank_sum_z(x, y)
    ref = stats.mannwhitneyu(
        y, x, axis=1, method="asymptotic", use_continuity=False, alternative=alternative
    )
    np.testing.assert_allclose(vt.pvalue(z, 1.0, None, rule), ref.pvalue, rtol=1e-9)


@pytest.mark.parametrize("ties", [False, True])
def test_signed_rank_matches_wilcoxon(ties):
    # recomputed: scipy.stats.wilcoxon(method="approx", correction=False, zero_method="wilcox")
    d = _rows(10, 16, 0.3, ties=ties)
    if ties:
        d[:, :2] = 0.0  # zeros are dropped by the "wilcox" convention
    z = vt.signed_rank_z(d)
    for i in range(10):
        ref = stats.wilcoxon(d[i], method="approx", correction=False, zero_method="wilcox")
        assert vt.pvalue(z[i : i + 1], 1.0, None, TWO)[0] == pytest.approx(ref.pvalue, rel=1e-9)


@pytest.mark.parametrize("ties", [False, True])
def test_kruskal_matches_scipy(ties):
    # recomputed: scipy.stats.kruskal (tie-corrected H)
    groups = [_rows(8, 7, ties=ties), _rows(8, 9, 0.5, ties=ties), _rows(8, 6, 1.0, ties=ties)]
    h = vt.kruskal_h(groups)
    for i in range(8):
        ref = stats.kruskal(*(g[i] for g in groups))
        assert h[i] == pytest.approx(ref.statistic, rel=1e-10)


def test_f_oneway_matches_scipy():
    # recomputed: scipy.stats.f_oneway
    groups = [_rows(8, 7), _rows(8, 9, 0.5), _rows(8, 6, 1.0), _rows(8, 10)]
    summaries = [vt.row_moments(g) for g in groups]
    f = vt.f_oneway([7, 9, 6, 10], [s[0] for s in summaries], [s[1] for s in summaries])
    ref = stats.f_oneway(*groups, axis=1)
    np.testing.assert_allclose(f, ref.statistic, rtol=1e-10)
    crit = vt.f_critical(0.05, 3, 28)
    assert np.array_equal(f > crit, ref.pvalue < 0.05)


def test_pearson_matches_scipy():
    # recomputed: scipy.stats.pearsonr (its p-value is the t test of ρ = 0)
    x = _rows(12, 15)
    y = 0.5 * x + _rows(12, 15)
    r = vt.pearson_r(x, y)
    refs = [stats.pearsonr(x[i], y[i]) for i in range(12)]
    np.testing.assert_allclose(r, [ref.statistic for ref in refs], rtol=1e-10)
    for alpha in (0.05, 0.2):
        want = np.array([ref.pvalue < alpha for ref in refs])
        assert np.array_equal(vt.correlation_reject(r, 15, 0.0, alpha, TWO), want)


def test_fisher_z_for_nonzero_null():
    # formula: Fisher z test, z = (atanh r − atanh r_null)·√(n − 3), two-sided normal reference
    r = np.array([0.1, 0.3, 0.5, 0.7])
    z = (np.arctanh(r) - np.arctanh(0.3)) * np.sqrt(47)
    want = 2 * stats.norm.sf(np.abs(z)) < 0.05
    assert np.array_equal(vt.correlation_reject(r, 50, 0.3, 0.05, TWO), want)


def test_pooled_z_matches_statsmodels():
    # recomputed: statsmodels proportions_ztest (pooled variance under H0)
    c1, c2 = np.array([12, 20, 5, 30]), np.array([18, 22, 15, 21])
    est, se = vt.two_proportion_z(c1, 40, c2, 45, pooled=True)
    for i in range(4):
        stat, p = sm_proportion.proportions_ztest([c2[i], c1[i]], [45, 40])
        assert (est / se)[i] == pytest.approx(stat, rel=1e-10)
        assert vt.pvalue(est[i : i + 1], se[i : i + 1], None, TWO)[0] == pytest.approx(p, rel=1e-9)


def test_shifted_wald_z_matches_statsmodels():
    # recomputed: statsmodels test_proportions_2indep(method="wald", value=margin, "larger")
    c1, c2 = np.array([30, 34, 28]), np.array([29, 27, 35])
    est, se = vt.two_proportion_z(c1, 40, c2, 42, pooled=False)
    rule = {"aim": "noninferiority", "alternative": "one-sided", "direction": 1, "margin": -0.1}
    ours = vt.pvalue(est, se, None, rule)
    for i in range(3):
        ref = sm_proportion.test_proportions_2indep(
            c2[i], 42, c1[i], 40, value=-0.1, method="wald", compare="diff", alternative="larger"
        )
        assert ours[i] == pytest.approx(ref.pvalue, rel=1e-9)


@pytest.mark.parametrize("alternative,rule", ALTERNATIVES)
def test_fisher_matches_scipy(alternative, rule):
    # recomputed: scipy.stats.fisher_exact on every table with 12 and 15 per group
    c1, c2 = np.meshgrid(np.arange(13), np.arange(16), indexing="ij")
    c1, c2 = c1.ravel(), c2.ravel()
    ours = vt.fisher_pvalues(c1, 12, c2, 15, rule)
    for a, b, p in zip(c1, c2, ours, strict=True):
        table = [[b, 15 - b], [a, 12 - a]]  # treatment row first: "greater" = treatment higher
        ref = stats.fisher_exact(table, alternative=alternative).pvalue
        assert p == pytest.approx(ref, rel=1e-9, abs=1e-15)


def test_logrank_matches_scipy():
    # recomputed: scipy.stats.logrank with right-censored data (statistic = (O − E)/√V)
    rows, n1, n2 = 6, 15, 18
    t = RNG.exponential(1.0, (rows, n1 + n2))
    t[:, n1:] *= 1.6
    c = RNG.uniform(0.5, 3.0, (rows, n1 + n2))
    event = t <= c
    time = np.minimum(t, c)
    z = vt.logrank_z(time, event, n1)
    for i in range(rows):
        x = stats.CensoredData.right_censored(time[i, n1:], ~event[i, n1:])
        y = stats.CensoredData.right_censored(time[i, :n1], ~event[i, :n1])
        ref = stats.logrank(x, y)
        assert abs(z[i]) == pytest.approx(abs(ref.statistic), rel=1e-9)
        assert vt.pvalue(z[i : i + 1], 1.0, None, TWO)[0] == pytest.approx(ref.pvalue, rel=1e-8)
