"""Small numeric helpers shared by the analytic designs: quantiles, normal power, root finding."""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import optimize, special, stats
from scipy.special import _ufuncs

from .errors import QuestionError

# Largest n per group the solvers look at; beyond it an effect is "too small to plan for".
MAX_N = 1e9

# The noncentral t survival function scipy.stats.nct.sf itself calls (clipped to [0, 1]);
# the public frozen-distribution path around it costs far more than the value. Absent in a
# future scipy, the public path is used.
_NCT_SF = getattr(_ufuncs, "_nct_sf", None)


def _t_ppf(q: float, df: float) -> float:
    """scipy.stats.t.ppf(q, df), digit for digit: its own special function inside (0, 1)."""
    if 0.0 < q < 1.0 and df > 0:
        return float(special.stdtrit(df, q))
    return float(stats.t.ppf(q, df))


def _nct_sf(x: float, df: float, nc: float) -> float:
    """scipy.stats.nct.sf(x, df, nc), digit for digit, without the distribution machinery."""
    if _NCT_SF is not None and df > 0 and math.isfinite(x) and nc == nc:
        with np.errstate(over="ignore"):
            p = float(_NCT_SF(x, df, nc))
        return p if p != p else min(max(p, 0.0), 1.0)  # np.clip's result, NaN kept
    return float(stats.nct.sf(x, df, nc))


def z(p: float) -> float:
    """Return the standard normal quantile at probability ``p``."""
    return float(special.ndtri(p))  # what scipy.stats.norm.ppf computes


def z_alpha(alpha: float, tails: int) -> float:
    """Return the critical normal value for a test at ``alpha`` with ``tails`` tails."""
    return z(1.0 - alpha / tails)


def z_sum(alpha: float, tails: int, power: float) -> float:
    """Return z_alpha + z_beta, the sum at the heart of every normal sample-size formula."""
    return z_alpha(alpha, tails) + z(power)


def normal_power(shift: float, z_a: float, tails: int) -> float:
    """Return the power of a z test whose statistic is N(shift, 1), including the far tail."""
    shift = abs(shift)
    power = special.ndtr(shift - z_a)  # scipy.stats.norm.cdf, without the wrapper
    if tails == 2:
        power += special.ndtr(-shift - z_a)
    return float(power)


def t_power(ncp: float, df: float, alpha: float, tails: int) -> float:
    """Return the power of a t test with noncentrality ``ncp`` (both tails when two-sided)."""
    tc = _t_ppf(1.0 - alpha / tails, df)
    power = _nct_sf(tc, df, ncp)
    if tails == 2:
        # The far tail is negligible once ncp is large, where scipy's nct can return NaN.
        far = _nct_sf(tc, df, -ncp)
        power += far if math.isfinite(far) else 0.0
    if not math.isfinite(power):
        raise ValueError(f"noncentral t power is not finite at df={df:g}, ncp={ncp:g}")
    return min(max(power, 0.0), 1.0)


def root(f: Callable[[float], float], lo: float, hi: float) -> float:
    """Return the root of ``f`` on [lo, hi] (a sign change is required) by Brent's method."""
    lo, hi = min(lo, hi), max(lo, hi)
    return float(optimize.brentq(f, lo, hi, xtol=1e-12, rtol=1e-12, maxiter=500))


def solve_increasing(
    f: Callable[[float], float],
    target: float,
    lo: float,
    *,
    hi: float = 16.0,
    limit: float = MAX_N,
) -> float | None:
    """Return the smallest x ≥ lo with f(x) = target for an increasing f, expanding hi; None if out of reach."""
    if f(lo) >= target:
        return lo
    hi = max(hi, 2.0 * lo)
    while f(hi) < target:
        if hi >= limit:
            return None
        lo, hi = hi, min(hi * 4.0, limit)
    return root(lambda x: f(x) - target, lo, hi)


def solve_n_or_raise(
    f: Callable[[float], float], target: float, lo: float, *, field: str, value: float
) -> float:
    """Solve the increasing power curve ``f(n) = target`` or raise a QuestionError naming ``field``."""
    n = solve_increasing(f, target, lo)
    if n is None or not math.isfinite(n):
        raise QuestionError(
            field,
            f"{value:g} is too small an effect: power {target:g} is not reached below "
            f"{MAX_N:.0e} per group",
        )
    return n


def solve_effect_or_raise(
    f: Callable[[float], float], target: float, per_group: list[float], *, hi: float
) -> float:
    """Return the smallest effect ≥ 0 where the increasing power curve ``f`` reaches ``target``."""
    x = solve_increasing(f, target, 0.0, hi=hi)
    if x is None:
        raise power_unreachable("sample_size.per_group", target, per_group)
    return x


def normal_effect(unit: float, z_a: float, tails: int, target: float, hi: float) -> float:
    """Return the effect x in [0, hi] at which a z test with mean ``unit``·x reaches ``target``."""
    return root(lambda x: normal_power(unit * x, z_a, tails) - target, 0.0, hi)


def power_unreachable(field: str, target: float, per_group: list[float]) -> QuestionError:
    """Return the error raised when no effect reaches the target power at the given n."""
    shown = [round(float(n), 2) for n in per_group]
    return QuestionError(
        field,
        f"no effect in the allowed range reaches power {target:g} with {shown} per group "
        "after adjustments; enrol more or lower the target power",
    )
