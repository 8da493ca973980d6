"""Many-to-one comparisons (k treatment groups against one shared control): Dunnett's critical
value and the power of the joint test, by deterministic quadrature.

The k statistics Tᵢ = (Ȳᵢ − Ȳ₀)/(S·√(1/nᵢ + 1/n₀)) share the control mean and the pooled SD S
(ν = N − k − 1 df). Their correlations have product form ρᵢⱼ = λᵢλⱼ with
λᵢ = 1/√(1 + n₀/nᵢ) (½ for equal groups), so, given a common normal Z₀ and W = S/σ,
Tᵢ·W = λᵢZ₀ + √(1 − λᵢ²)Zᵢ + θᵢ are independent: every probability below is a two-dimensional
integral over Z₀ (Gauss–Hermite) and W (Gauss–Legendre on the χ quantile scale), as in
Dunnett (1955). Pure numpy/scipy, deterministic (unlike a randomized multivariate-t cdf).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy import optimize, special, stats

_NODES = 64
NORMAL_DF = 1e6  # above this many error df the pooled SD is taken as known


@lru_cache(maxsize=1)
def _hermite() -> tuple[np.ndarray, np.ndarray]:
    x, w = np.polynomial.hermite_e.hermegauss(_NODES)  # weight exp(−x²/2)
    return x, w / math.sqrt(2.0 * math.pi)


@lru_cache(maxsize=1)
def _legendre() -> tuple[np.ndarray, np.ndarray]:
    x, w = np.polynomial.legendre.leggauss(_NODES)
    return (x + 1.0) / 2.0, w / 2.0  # on (0, 1)


@lru_cache(maxsize=256)
def _scale_nodes(df: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights of W = √(χ²_ν/ν); a point mass at 1 for very large ν."""
    if df >= NORMAL_DF:
        return np.ones(1), np.ones(1)
    u, w = _legendre()
    return np.sqrt(stats.chi2.ppf(u, df) / df), w


def lambdas(per_group: list[float]) -> np.ndarray:
    """λᵢ = 1/√(1 + n₀/nᵢ) for the treatment groups (per_group: control first)."""
    n0 = float(per_group[0])
    return np.array([1.0 / math.sqrt(1.0 + n0 / float(n)) for n in per_group[1:]])


def _cell_probs(c: float, lam: np.ndarray, theta: np.ndarray, df: float, tails: int):
    """P(Tᵢ accepted | Z₀, W) on the (W, Z₀) grid, shape (w, z, k); accepted: |Tᵢ| ≤ c (two
    tails) or Tᵢ ≤ c (one tail, the statistic already turned towards the effect)."""
    z, _ = _hermite()
    s, _ = _scale_nodes(df)
    sd = np.sqrt(1.0 - lam * lam)
    shift = lam[None, None, :] * z[None, :, None] + theta[None, None, :]
    upper = (c * s[:, None, None] - shift) / sd
    if tails == 1:
        return special.ndtr(upper)
    lower = (-c * s[:, None, None] - shift) / sd
    return special.ndtr(upper) - special.ndtr(lower)


def _integrate(values: np.ndarray, df: float) -> float:
    _, wz = _hermite()
    _, ws = _scale_nodes(df)
    return float(np.einsum("i,ij,j->", ws, values, wz))


def prob_none(c: float, lam, theta, df: float, tails: int) -> float:
    """P(no statistic exceeds c)."""
    return _integrate(np.prod(_cell_probs(c, lam, theta, df, tails), axis=2), df)


def prob_all(c: float, lam, theta, df: float, tails: int) -> float:
    """P(every statistic exceeds c)."""
    return _integrate(np.prod(1.0 - _cell_probs(c, lam, theta, df, tails), axis=2), df)


def dunnett_critical(alpha: float, per_group: list[float], df: float, tails: int) -> float:
    """Dunnett's many-to-one critical value: P(no |Tᵢ| > c) = 1 − α under the null."""
    lam = lambdas(per_group)
    zero = np.zeros(len(lam))
    lo = float(stats.t.isf(alpha / tails, df))  # one comparison: too small a value
    hi = float(stats.t.isf(alpha / (tails * len(lam)), df)) + 1e-9  # Bonferroni: too large
    if len(lam) == 1:
        return lo
    return float(
        optimize.brentq(
            lambda c: prob_none(c, lam, zero, df, tails) - (1.0 - alpha), lo, hi, xtol=1e-10
        )
    )


def bonferroni_critical(alpha: float, k: int, df: float, tails: int) -> float:
    """The t critical value at alpha split over k comparisons."""
    return float(stats.t.isf(alpha / (tails * k), df))


def power(
    c: float,
    per_group: list[float],
    means_diff: list[float],
    sd: float,
    df: float,
    tails: int,
    goal: str,
) -> float:
    """Power of the joint test at critical value c: any (disjunctive) or all (conjunctive)
    treatment groups significant. ``means_diff`` are treatment − control on the side the
    one-sided test looks (already signed); two-sided tests count |Tᵢ| > c."""
    n0 = float(per_group[0])
    lam = lambdas(per_group)
    theta = np.array(
        [
            d / (sd * math.sqrt(1.0 / float(n) + 1.0 / n0))
            for d, n in zip(means_diff, per_group[1:], strict=True)
        ]
    )
    if goal == "all_treatments":
        return min(max(prob_all(c, lam, theta, df, tails), 0.0), 1.0)
    return min(max(1.0 - prob_none(c, lam, theta, df, tails), 0.0), 1.0)


def stepwise_success(p: np.ndarray, alpha: float, procedure: str, goal: str) -> np.ndarray:
    """Per row of p-values (rows, k): does Holm's step-down or Hochberg's step-up procedure
    reject at least one (goal any_treatment) or every (all_treatments) hypothesis?"""
    p = np.sort(p, axis=1)  # smallest first
    k = p.shape[1]
    below = p <= alpha / (k - np.arange(k))  # p₍ⱼ₎ ≤ α/(k − j + 1)
    if procedure == "holm":  # step-down: reject while each ordered p passes its level
        return below[:, 0] if goal == "any_treatment" else below.all(axis=1)
    if procedure == "hochberg":  # step-up: reject up to the largest j that passes
        return below.any(axis=1) if goal == "any_treatment" else below[:, -1]
    raise ValueError(f"unknown procedure {procedure!r}")
