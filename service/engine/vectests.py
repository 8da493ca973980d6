"""Vectorized statistical tests: every function works on whole batches of replicates at once.

Raw data arrive as (replicates, n) float arrays, one per arm; summaries as 1-d arrays with one
value per replicate. Statistics follow scipy.stats' conventions (treatment minus control, Y
against X) so the kernels can be checked against scipy on small data sets. A *rule* dict says
what "reject" means:

    {"aim": "superiority" | "noninferiority" | "equivalence", "alternative": "two-sided" | "one-sided",
     "direction": +1 | -1, "margin": float | None}

``direction`` is the sign of the alternative for one-sided tests (+1: treatment higher).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import special, stats

# --- decisions ---------------------------------------------------------------------------


def _upper_tail(stat: np.ndarray, df) -> np.ndarray:
    """P(T ≥ stat) for a t (df) or, with df None, a standard normal reference."""
    if df is None:
        return special.ndtr(-stat)
    return special.stdtr(df, -stat)


def _exceeds(stat: np.ndarray, df, level: float) -> np.ndarray:
    """True where stat lies above the upper ``level`` quantile (one critical value when df is fixed)."""
    if df is None:
        return stat > special.ndtri(1.0 - level)
    if np.ndim(df) == 0:
        return stat > special.stdtrit(float(df), 1.0 - level)
    # Varying df (Welch): critical values fall with df, so only statistics between the
    # critical values at the largest and smallest df need a p-value.
    with np.errstate(invalid="ignore"):
        finite = df[np.isfinite(df)]
        if finite.size == 0:
            return np.zeros(stat.shape, dtype=bool)
        out = stat > special.stdtrit(finite.min(), 1.0 - level)
        band = np.flatnonzero((stat > special.stdtrit(finite.max(), 1.0 - level)) & ~out)
    if band.size:
        out[band] = special.stdtr(df[band], -stat[band]) < level
    return out


def decide(est: np.ndarray, se: np.ndarray, df, alpha: float, rule: dict) -> np.ndarray:
    """Return the reject decisions of a (shifted) Wald or t statistic ``(est − δ)/se`` under ``rule``."""
    aim = rule.get("aim", "superiority")
    with np.errstate(divide="ignore", invalid="ignore"):
        if aim == "superiority":
            stat = est / se
            if rule["alternative"] == "two-sided":
                return _exceeds(np.abs(stat), df, alpha / 2)
            return _exceeds(rule["direction"] * stat, df, alpha)
        margin = rule["margin"]
        if aim == "noninferiority":
            return _exceeds(rule["direction"] * (est - margin) / se, df, alpha)
        if aim == "equivalence":
            lower = _exceeds((est + margin) / se, df, alpha)
            upper = _exceeds(-(est - margin) / se, df, alpha)
            return lower & upper
    raise ValueError(f"unknown hypothesis aim {aim!r}")


def pvalue(est: np.ndarray, se: np.ndarray, df, rule: dict) -> np.ndarray:
    """Return p-values of the statistic under ``rule`` (TOST: the larger of the two one-sided p)."""
    aim = rule.get("aim", "superiority")
    with np.errstate(divide="ignore", invalid="ignore"):
        if aim == "superiority":
            stat = est / se
            if rule["alternative"] == "two-sided":
                return np.minimum(1.0, 2 * _upper_tail(np.abs(stat), df))
            return _upper_tail(rule["direction"] * stat, df)
        margin = rule["margin"]
        if aim == "noninferiority":
            return _upper_tail(rule["direction"] * (est - margin) / se, df)
        lower = _upper_tail((est + margin) / se, df)
        upper = _upper_tail(-(est - margin) / se, df)
        return np.maximum(lower, upper)


# --- means --------------------------------------------------------------------------------


def row_moments(x: np.ndarray, center: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Return per-row mean and unbiased variance of ``x`` (one pass: a sum and a dot product).

    ``center`` is subtracted first when given; the one-pass formula loses digits only when
    |mean| is many orders of magnitude above the SD, which callers avoid by centring.
    """
    n = x.shape[1]
    if center:
        x = x - center
    s = x.sum(axis=1)
    ss = np.einsum("ij,ij->i", x, x)
    mean = s / n
    var = (ss - s * mean) / (n - 1)
    np.maximum(var, 0.0, out=var)
    if center:
        mean += center
    return mean, var


def two_sample_t(m1, v1, n1: int, m2, v2, n2: int, *, equal_var: bool):
    """Return (difference m2 − m1, its standard error, df) for the Student or Welch t test."""
    est = m2 - m1
    if equal_var:
        df = n1 + n2 - 2
        pooled = ((n1 - 1) * v1 + (n2 - 1) * v2) / df
        se = np.sqrt(pooled * (1.0 / n1 + 1.0 / n2))
        return est, se, df
    a, b = v1 / n1, v2 / n2
    var = a + b
    with np.errstate(divide="ignore", invalid="ignore"):
        df = var * var / (a * a / (n1 - 1) + b * b / (n2 - 1))
    return est, np.sqrt(var), df


def ancova_t(x1, y1, x2, y2):
    """Return (adjusted difference, its standard error, df) of the least-squares fit
    y = a + b·group + c·x per row (group 1 = second sample; common slope), in closed form.

    Rows are replicates; within-group sums of squares and products give the slope, the
    adjusted difference is (ȳ₂ − ȳ₁) − c·(x̄₂ − x̄₁) and its variance
    s²·(1/n₁ + 1/n₂ + (x̄₂ − x̄₁)²/Sxx), s² on n₁ + n₂ − 3 df.
    """
    sums = []
    for x, y in ((x1, y1), (x2, y2)):
        mx, my = x.mean(axis=1), y.mean(axis=1)
        xc, yc = x - mx[:, None], y - my[:, None]
        sums.append(
            (
                mx,
                my,
                np.einsum("ij,ij->i", xc, xc),
                np.einsum("ij,ij->i", xc, yc),
                np.einsum("ij,ij->i", yc, yc),
            )
        )
    (mx1, my1, sxx1, sxy1, syy1), (mx2, my2, sxx2, sxy2, syy2) = sums
    n1, n2 = x1.shape[1], x2.shape[1]
    sxx, sxy, syy = sxx1 + sxx2, sxy1 + sxy2, syy1 + syy2
    slope = sxy / sxx
    gap = mx2 - mx1
    est = (my2 - my1) - slope * gap
    df = n1 + n2 - 3
    s2 = np.maximum(syy - slope * sxy, 0.0) / df
    se = np.sqrt(s2 * (1.0 / n1 + 1.0 / n2 + gap * gap / sxx))
    return est, se, df


def one_sample_t(m, v, n: int):
    """Return (mean, its standard error, df) for the one-sample t test of mean 0."""
    return m, np.sqrt(v / n), n - 1


# --- ranks --------------------------------------------------------------------------------


def _sorted_ranks(xs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For rows already sorted, return average ranks (1-based) and per-row Σ(t³ − t) over ties."""
    rows, n = xs.shape
    idx = np.arange(n)
    new = np.ones((rows, n), dtype=bool)
    np.not_equal(xs[:, 1:], xs[:, :-1], out=new[:, 1:])
    if new.all():  # continuous data: no ties, ranks are positions
        return np.broadcast_to(idx + 1.0, (rows, n)), np.zeros(rows)
    start = np.maximum.accumulate(np.where(new, idx, 0), axis=1)
    last = np.ones((rows, n), dtype=bool)
    last[:, :-1] = new[:, 1:]
    end = np.minimum.accumulate(np.where(last, idx, n - 1)[:, ::-1], axis=1)[:, ::-1]
    size = (end - start + 1).astype(np.float64)
    ranks = (start + end) / 2.0 + 1.0
    ties = (size * size - 1.0).sum(axis=1)  # each member of a tie of size t adds t² − 1
    return ranks, ties


def _masked_sums(mask: np.ndarray, ranks: np.ndarray) -> np.ndarray:
    """Per row, the sum of the ranks where ``mask`` holds, as a product with the 0/1 mask.

    Ranks are whole or half numbers, so every partial sum is exact and any summation order
    gives the same digits; untied rows (one rank row for all) take a matrix-vector product,
    eight times faster than summing a masked copy.
    """
    weights = mask.astype(np.float64)
    if ranks.strides[0] == 0:  # _sorted_ranks' broadcast positions: no ties in any row
        return weights @ ranks[0]
    return np.einsum("ij,ij->i", weights, ranks)


def rank_sum_z(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the Wilcoxon–Mann–Whitney z of Y against X (normal approximation, tie-corrected).

    No continuity correction (scipy's ``use_continuity=False``); positive when Y tends higher.
    """
    n1, n2 = x.shape[1], y.shape[1]
    n = n1 + n2
    both = np.concatenate((x, y), axis=1)
    # Any sort order will do: tied values share one averaged rank, and sums of half-integer
    # ranks are exact, so the default (unstable, ~4× faster) sort gives the same digits.
    order = np.argsort(both, axis=1)
    ranks, ties = _sorted_ranks(np.take_along_axis(both, order, axis=1))
    r2 = _masked_sums(order >= n1, ranks)
    u2 = r2 - n2 * (n2 + 1) / 2.0
    var = n1 * n2 / 12.0 * ((n + 1) - ties / (n * (n - 1)))
    with np.errstate(divide="ignore", invalid="ignore"):
        return (u2 - n1 * n2 / 2.0) / np.sqrt(var)


def signed_rank_z(d: np.ndarray) -> np.ndarray:
    """Return the Wilcoxon signed-rank z of differences ``d`` against 0 (normal approximation).

    Zeros are dropped (scipy's ``zero_method="wilcox"``), ties get average ranks and the
    variance their correction; no continuity correction. Positive when d tends above 0.
    """
    a = np.abs(d)
    order = np.argsort(a, axis=1)  # ties share an averaged rank: any order (see rank_sum_z)
    a_sorted = np.take_along_axis(a, order, axis=1)
    ranks, ties = _sorted_ranks(a_sorted)
    zeros = (a_sorted == 0).sum(axis=1).astype(np.float64)
    # Zeros sort first and form one tie group; dropping them lowers every other rank by #zeros.
    ties = ties - (zeros**3 - zeros)
    positive = np.take_along_axis(d, order, axis=1) > 0
    # Σ over positive d of (rank − #zeros), exact in any order (see _masked_sums)
    t_plus = _masked_sums(positive, ranks) - zeros * positive.sum(axis=1)
    m = d.shape[1] - zeros
    mean = m * (m + 1) / 4.0
    var = m * (m + 1) * (2 * m + 1) / 24.0 - ties / 48.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return (t_plus - mean) / np.sqrt(var)


def kruskal_h(groups: list[np.ndarray]) -> np.ndarray:
    """Return the Kruskal–Wallis H per row (tie-corrected), to compare with χ²(k − 1)."""
    sizes = [g.shape[1] for g in groups]
    n = sum(sizes)
    both = np.concatenate(groups, axis=1)
    order = np.argsort(both, axis=1)  # ties share an averaged rank: any order (see rank_sum_z)
    ranks, ties = _sorted_ranks(np.take_along_axis(both, order, axis=1))
    label = np.repeat(np.arange(len(groups)), sizes)[order]
    h = np.zeros(both.shape[0])
    for i, size in enumerate(sizes):
        r = np.where(label == i, ranks, 0.0).sum(axis=1)
        h += r * r / size
    h = 12.0 / (n * (n + 1)) * h - 3.0 * (n + 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return h / (1.0 - ties / (n**3 - n))


def f_oneway(sizes: list[int], means: list[np.ndarray], variances: list[np.ndarray]) -> np.ndarray:
    """Return the one-way ANOVA F per row from group sizes, means and unbiased variances."""
    n, k = sum(sizes), len(sizes)
    grand = sum(s * m for s, m in zip(sizes, means, strict=True)) / n
    between = sum(s * (m - grand) ** 2 for s, m in zip(sizes, means, strict=True)) / (k - 1)
    within = sum((s - 1) * v for s, v in zip(sizes, variances, strict=True)) / (n - k)
    with np.errstate(divide="ignore", invalid="ignore"):
        return between / within


# --- correlation --------------------------------------------------------------------------


def pearson_r(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the sample correlation per row of paired raw data."""
    xc = x - x.mean(axis=1, keepdims=True)
    yc = y - y.mean(axis=1, keepdims=True)
    sxy = np.einsum("ij,ij->i", xc, yc)
    return sxy / np.sqrt(np.einsum("ij,ij->i", xc, xc) * np.einsum("ij,ij->i", yc, yc))


def correlation_reject(
    r: np.ndarray, n: int, r_null: float, alpha: float, rule: dict
) -> np.ndarray:
    """Reject H0: ρ = r_null — the exact t test of ρ = 0 when r_null = 0, else the Fisher z test."""
    if r_null == 0:
        with np.errstate(divide="ignore", invalid="ignore"):
            t = r * math.sqrt(n - 2) / np.sqrt(np.maximum(1.0 - r * r, 0.0))
        return decide(t, 1.0, n - 2, alpha, rule)
    z = (np.arctanh(np.clip(r, -1 + 1e-15, 1 - 1e-15)) - math.atanh(r_null)) * math.sqrt(n - 3)
    return decide(z, 1.0, None, alpha, rule)


# --- proportions --------------------------------------------------------------------------


@functools.lru_cache(maxsize=256)
def _binomial_cdf(n: int, p: float) -> np.ndarray:
    return special.bdtr(np.arange(n + 1), n, p)


_EDGE = 1e-9  # uniforms this close to a CDF step (or to 0 or 1) are left to scipy itself


def binomial_quantile(u: np.ndarray, n: int, p: float) -> np.ndarray:
    """Return scipy.stats.binom.ppf(u, n, p) for u in (0, 1], as float64, the same digits faster.

    The smallest k with CDF(k) ≥ u is found by a sorted search of the CDF table of (n, p)
    (scipy's quantile solver costs microseconds per value). Where the table and scipy's solver
    could round differently — u within 1e−9 of a CDF step, of 0 or of 1 — scipy answers.
    """
    if not 0.0 < p < 1.0:
        return stats.binom.ppf(u, n, p)
    cdf = _binomial_cdf(int(n), float(p))
    k = np.searchsorted(cdf, u, side="left")
    np.minimum(k, n, out=k)
    above = cdf[k] - u
    below = u - cdf[np.maximum(k - 1, 0)]
    close = (above <= _EDGE) | ((k > 0) & (below <= _EDGE)) | (u <= _EDGE) | (u >= 1.0 - _EDGE)
    out = k.astype(np.float64)
    if close.any():
        out[close] = stats.binom.ppf(u[close], n, p)
    return out


def two_proportion_z(c1, n1: int, c2, n2: int, *, pooled: bool, continuity: bool = False):
    """Return (p̂2 − p̂1, its standard error) for the two-proportion z test.

    ``pooled`` uses the common proportion (the test of equality); otherwise the unpooled
    Wald error used for shifted (non-inferiority, equivalence) nulls. With ``continuity`` the
    difference is moved ½(1/n1 + 1/n2) toward zero (Yates).
    """
    p1, p2 = c1 / n1, c2 / n2
    est = p2 - p1
    if pooled:
        pbar = (c1 + c2) / (n1 + n2)
        se = np.sqrt(pbar * (1 - pbar) * (1.0 / n1 + 1.0 / n2))
    else:
        se = np.sqrt(p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2)
    if continuity:
        cc = 0.5 * (1.0 / n1 + 1.0 / n2)
        est = np.sign(est) * np.maximum(np.abs(est) - cc, 0.0)
    return est, se


def _hypergeom_logpmf(k: np.ndarray, total: int, successes: int, drawn: int) -> np.ndarray:
    """log P(K = k) when ``drawn`` of ``total`` items are taken and ``successes`` are marked."""
    g = special.gammaln
    return (
        g(successes + 1)
        - g(k + 1)
        - g(successes - k + 1)
        + g(total - successes + 1)
        - g(drawn - k + 1)
        - g(total - successes - drawn + k + 1)
        - g(total + 1)
        + g(drawn + 1)
        + g(total - drawn + 1)
    )


def fisher_pvalues(c1, n1: int, c2, n2: int, rule: dict) -> np.ndarray:
    """Return Fisher's exact conditional p-values for many 2×2 tables (arm 2 against arm 1).

    Tables are grouped by their margin total s = c1 + c2; for each s the hypergeometric law of
    c2 given s is computed once over its whole support (two-sided: the sum of all tables no more
    likely than the one observed, scipy's relative tolerance 1e−7).
    """
    c1 = np.asarray(c1, dtype=np.int64)
    c2 = np.asarray(c2, dtype=np.int64)
    s = c1 + c2
    out = np.empty(c1.shape, dtype=np.float64)
    n = n1 + n2
    for total in np.unique(s):
        lo, hi = max(0, total - n1), min(total, n2)
        support = np.arange(lo, hi + 1)
        pmf = np.exp(_hypergeom_logpmf(support, n, int(total), n2))
        where = s == total
        k = c2[where] - lo
        if rule["alternative"] == "two-sided":
            pobs = pmf[k]
            order = np.argsort(pmf, kind="stable")
            cum = np.cumsum(pmf[order])
            # p = Σ pmf[j] over pmf[j] ≤ pobs·(1 + 1e−7): a sorted search, not a loop per table.
            pos = np.searchsorted(pmf[order], pobs * (1 + 1e-7), side="right")
            p = cum[pos - 1]
        elif rule["direction"] > 0:
            p = np.cumsum(pmf[::-1])[::-1][k]  # P(C2 ≥ c2)
        else:
            p = np.cumsum(pmf)[k]  # P(C2 ≤ c2)
        out[where] = np.minimum(p, 1.0)
    return out


def fisher_reject(c1, n1: int, c2, n2: int, alpha: float, rule: dict) -> np.ndarray:
    """Return Fisher exact test decisions at ``alpha`` for many 2×2 tables."""
    return fisher_pvalues(c1, n1, c2, n2, rule) <= alpha


# --- time to event ------------------------------------------------------------------------


def logrank_z(time: np.ndarray, event: np.ndarray, n_control: int) -> np.ndarray:
    """Return the log-rank z per row: (observed − expected) treatment events over √variance."""
    excess, variance = logrank_parts(time, event, n_control)
    with np.errstate(divide="ignore", invalid="ignore"):
        return excess / np.sqrt(variance)


def logrank_parts(
    time: np.ndarray, event: np.ndarray, n_control: int, hr0: float = 1.0
) -> tuple[np.ndarray, np.ndarray]:
    """Return per row the observed − expected treatment events and the log-rank variance.

    With ``hr0`` ≠ 1 the expectation is under hazard ratio hr0 (the Cox score test of
    β = ln hr0: each treatment subject at risk weighs hr0), the test against a margin.

    Columns ``[:n_control]`` are the control arm. Times are continuous, so ties have
    probability zero and each event time has one event; negative z means fewer treatment
    events than expected (hazard ratio below 1).
    """
    rows, n = time.shape
    order = np.argsort(time, axis=1)
    treated = order >= n_control
    died = np.take_along_axis(event, order, axis=1)
    at_risk = np.arange(n, 0, -1, dtype=np.float64)
    # Treatment subjects still at risk just before each ordered time (int32 counts: n is small,
    # and the 32-bit running sum is several times faster than the default 64-bit one).
    t_risk = np.cumsum(treated, axis=1, dtype=np.int32)
    np.subtract(treated.sum(axis=1, keepdims=True, dtype=np.int32), t_risk, out=t_risk)
    t_risk += treated
    if hr0 == 1.0:
        share = t_risk / at_risk
    else:
        weighted = hr0 * t_risk
        share = weighted / (at_risk - t_risk + weighted)
    observed = (died & treated).sum(axis=1)
    expected = np.where(died, share, 0.0).sum(axis=1)
    spread = np.subtract(1.0, share)
    spread *= share  # share · (1 − share), in place
    variance = np.where(died, spread, 0.0).sum(axis=1)
    return observed - expected, variance


def chi2_critical(alpha: float, df: int) -> float:
    """Return the upper-alpha critical value of χ²(df)."""
    return float(stats.chi2.isf(alpha, df))


def f_critical(alpha: float, df1: int, df2: int) -> float:
    """Return the upper-alpha critical value of F(df1, df2)."""
    return float(stats.f.isf(alpha, df1, df2))


# --- event counts --------------------------------------------------------------------------


def _rate_parts(y: np.ndarray, t: np.ndarray | float) -> tuple:
    """One group's events, exposure and the method-of-moments parts of κ (rows,)."""
    n = y.shape[1]
    events = y.sum(axis=1)
    if np.ndim(t) == 0:
        exposure, t2, t3 = n * t, n * t * t, n * t**3
        rate = events / exposure
        resid = y - (rate * t)[:, None]
    else:
        exposure, t2, t3 = t.sum(axis=1), (t * t).sum(axis=1), (t**3).sum(axis=1)
        rate = events / exposure
        resid = y - rate[:, None] * t
    # E[(Y − λ̂t)²] = λt(1 − t/T) + κλ²(t² − 2t³/T + t²·Σt²/T²), summed over the group.
    num = np.einsum("ij,ij->i", resid, resid) - rate * (exposure - t2 / exposure)
    den = rate * rate * (t2 - 2.0 * t3 / exposure + t2 * t2 / (exposure * exposure))
    return events, exposure, t2, num, den


def rate_ratio_wald(y0, t0, y1, t1, *, estimate_dispersion: bool):
    """Return (log rate ratio, its SE) per replicate, treatment (1) over control (0).

    Each group's rate is its events over its exposure; the SE is √Σ(1/events + κ̂·Σt²/T²), with
    κ̂ = 0 (Poisson) or the method-of-moments dispersion pooled over both groups (truncated at
    0). A group without events gives an infinite SE (the replicate does not reject).
    """
    e0, x0, s0, n0, d0 = _rate_parts(y0, t0)
    e1, x1, s1, n1, d1 = _rate_parts(y1, t1)
    with np.errstate(divide="ignore", invalid="ignore"):
        if estimate_dispersion:
            kappa = np.maximum((n0 + n1) / (d0 + d1), 0.0)
            kappa = np.where(np.isfinite(kappa), kappa, 0.0)
        else:
            kappa = 0.0
        var = 1.0 / e0 + 1.0 / e1 + kappa * (s0 / (x0 * x0) + s1 / (x1 * x1))
        est = np.log(e1 / x1) - np.log(e0 / x0)
        est = np.where(np.isfinite(est), est, 0.0)
    return est, np.sqrt(var)


def residual_ss(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the least-squares residual sum of squares of y on the columns of x, per row.

    x is (rows, n, p), y (rows, n); the normal equations of every replicate are solved at once
    (well conditioned for the standardized predictors the kernels draw).
    """
    gram = np.einsum("rni,rnj->rij", x, x)
    cross = np.einsum("rni,rn->ri", x, y)
    coef = np.linalg.solve(gram, cross[:, :, None])[:, :, 0]
    total = np.einsum("rn,rn->r", y, y)
    return np.maximum(total - np.einsum("ri,ri->r", coef, cross), 0.0)


def mann_whitney_auc(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the Mann–Whitney AUC, P(Y > X) + ½P(Y = X), of every row (ties share ranks)."""
    n1, n2 = x.shape[1], y.shape[1]
    both = np.concatenate((x, y), axis=1)
    order = np.argsort(both, axis=1)
    ranks, _ = _sorted_ranks(np.take_along_axis(both, order, axis=1))
    r2 = np.where(order >= n1, ranks, 0.0).sum(axis=1)
    return (r2 - n2 * (n2 + 1) / 2.0) / (n1 * n2)
