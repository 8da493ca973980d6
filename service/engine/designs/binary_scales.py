"""Two proportions compared on the difference, risk-ratio or odds-ratio scale: the restricted
maximum-likelihood proportions, the score statistics of Farrington & Manning (1990) and Miettinen
& Nurminen (1985), their normal-approximation power, and the power of the score test by exact
enumeration of every outcome (x_control, x_treatment).

Group 1 is the control, group 2 the treatment; the contrast is treatment against control:
p2 − p1 (difference), p2/p1 (risk ratio), [p2/(1 − p2)]/[p1/(1 − p1)] (odds ratio). A bound on a
ratio scale is passed as its natural log (the way ``hypothesis.margin`` carries it).

Everything takes numpy arrays (or floats) and broadcasts, so the simulation kernel and the
enumeration call the same functions as the analytic formulas.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import special, stats

SCALES = ("difference", "risk_ratio", "odds_ratio")
ENUMERATION_LIMIT = 200  # largest group size the exact enumeration accepts
UNCONDITIONAL_LIMIT = 100  # largest group size of the exact unconditional test (a p per table)


def contrast(p1, p2, scale: str):
    """The treatment-vs-control contrast on the working scale (ratios as their natural log)."""
    if scale == "difference":
        return p2 - p1
    if scale == "risk_ratio":
        return np.log(p2) - np.log(p1)
    return np.log(p2) - np.log1p(-p2) - np.log(p1) + np.log1p(-p1)


def at_bound(p1, bound: float, scale: str):
    """The treatment proportion whose contrast with control ``p1`` equals ``bound``."""
    if scale == "difference":
        return p1 + bound
    if scale == "risk_ratio":
        return p1 * np.exp(bound)
    odds = p1 / (1.0 - p1) * np.exp(bound)
    return odds / (1.0 + odds)


def restricted_mle(p1, p2, n1, n2, scale: str, bound: float):
    """Return (p̃1, p̃2), the MLE of the two proportions under contrast = ``bound``.

    ``p1``, ``p2`` are observed (or expected) proportions in groups of n1 and n2. Closed forms:
    the cubic of Miettinen & Nurminen (1985) / Farrington & Manning (1990) for a difference, the
    quadratic of Farrington & Manning (1990) for a risk ratio, and for an odds ratio the quadratic
    from the intercept's score equation n1·p̃1 + n2·p̃2 = x1 + x2 (Miettinen & Nurminen 1985).
    """
    p1 = np.asarray(p1, dtype=float)
    p2 = np.asarray(p2, dtype=float)
    total = n1 + n2
    x1, x2 = n1 * p1, n2 * p2
    s = x1 + x2
    with np.errstate(divide="ignore", invalid="ignore"):
        if scale == "risk_ratio":
            theta = np.exp(bound)
            a = total * theta
            b = -(theta * n2 + x2 + n1 + theta * x1)
            disc = np.sqrt(np.maximum(b * b - 4.0 * a * s, 0.0))
            q1 = np.where(s > 0, 2.0 * s / (-b + disc), 0.0)
            q1 = np.clip(q1, 0.0, min(1.0, 1.0 / theta))
            return q1, np.clip(theta * q1, 0.0, 1.0)
        if scale == "odds_ratio":
            psi = np.exp(bound)
            a = n1 * (psi - 1.0)
            b = n2 * psi + n1 - s * (psi - 1.0)
            disc = np.sqrt(np.maximum(b * b + 4.0 * a * s, 0.0))
            q1 = np.where(s > 0, 2.0 * s / (b + disc), 0.0)
            q1 = np.clip(q1, 0.0, 1.0)
            q2 = psi * q1 / (1.0 + (psi - 1.0) * q1)
            return q1, np.clip(q2, 0.0, 1.0)
        # difference: the cubic in the treatment proportion, trigonometric root (FM 1990, p. 1453)
        delta = bound
        if delta == 0:
            pooled = s / total
            return pooled, pooled
        theta = n1 / n2
        a = 1.0 + theta
        b = -(1.0 + theta + p2 + theta * p1 + delta * (theta + 2.0))
        c = delta * delta + delta * (2.0 * p2 + theta + 1.0) + p2 + theta * p1
        d = -p2 * delta * (1.0 + delta)
        v = b**3 / (3.0 * a) ** 3 - b * c / (6.0 * a * a) + d / (2.0 * a)
        u = np.sign(v) * np.sqrt(np.maximum(b * b / (3.0 * a) ** 2 - c / (3.0 * a), 0.0))
        u = np.where(u == 0, 1e-300, u)
        w = (np.pi + np.arccos(np.clip(v / u**3, -1.0, 1.0))) / 3.0
        q2 = 2.0 * u * np.cos(w) - b / (3.0 * a)
        q1 = q2 - delta
        return np.clip(q1, 0.0, 1.0), np.clip(q2, 0.0, 1.0)


def _numerator(p1, p2, q1, q2, scale: str, bound: float):
    """The score numerator: p̂2 − p̂1 − δ, p̂2 − θ·p̂1, or the odds-ratio score per Miettinen–Nurminen."""
    if scale == "difference":
        return p2 - p1 - bound
    if scale == "risk_ratio":
        return p2 - np.exp(bound) * p1
    return (p2 - q2) / (q2 * (1.0 - q2)) - (p1 - q1) / (q1 * (1.0 - q1))


def _variance(p1, p2, q1, q2, n1, n2, scale: str, bound: float):
    """Variance of the numerator at (p1, p2) with the restricted (q1, q2) as the odds-ratio weights."""
    if scale == "difference":
        return p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2
    if scale == "risk_ratio":
        return p2 * (1.0 - p2) / n2 + np.exp(2.0 * bound) * p1 * (1.0 - p1) / n1
    w1, w2 = q1 * (1.0 - q1), q2 * (1.0 - q2)
    return p2 * (1.0 - p2) / (n2 * w2 * w2) + p1 * (1.0 - p1) / (n1 * w1 * w1)


def score_z(x1, n1: int, x2, n2: int, scale: str, bound: float, *, mn: bool):
    """The score statistic for H0: contrast = ``bound`` from counts x1 (control), x2 (treatment).

    Positive when the treatment's contrast lies above the bound. ``mn`` multiplies the null
    variance by N/(N − 1) (Miettinen & Nurminen 1985); without it, Farrington & Manning (1990).
    Tables whose null variance is 0 (all events or none, when the bound allows no spread) give
    z = 0 (no evidence).
    """
    p1 = np.asarray(x1, dtype=float) / n1
    p2 = np.asarray(x2, dtype=float) / n2
    q1, q2 = restricted_mle(p1, p2, n1, n2, scale, bound)
    with np.errstate(divide="ignore", invalid="ignore"):
        num = _numerator(p1, p2, q1, q2, scale, bound)
        if scale == "odds_ratio":
            var0 = 1.0 / (n2 * q2 * (1.0 - q2)) + 1.0 / (n1 * q1 * (1.0 - q1))
        else:
            var0 = _variance(q1, q2, q1, q2, n1, n2, scale, bound)
        if mn:
            var0 = var0 * (n1 + n2) / (n1 + n2 - 1.0)
        z = num / np.sqrt(var0)
    return np.where(np.isfinite(z), z, 0.0)


def normal_parts(p1: float, p2: float, n1: float, n2: float, scale: str, bound: float):
    """(mean, SD under the truth, SD under the null) of the score numerator, for the power.

    The null SD uses the restricted MLE at the expected proportions (it does not depend on n
    beyond the 1/n factors); the SD under the truth, the assumed proportions (Farrington &
    Manning 1990, eq. for n with V0 and V1).
    """
    q1, q2 = restricted_mle(p1, p2, n1, n2, scale, bound)
    q1, q2 = float(q1), float(q2)
    mean = float(_numerator(p1, p2, q1, q2, scale, bound))
    sd1 = float(np.sqrt(_variance(p1, p2, q1, q2, n1, n2, scale, bound)))
    if scale == "odds_ratio":
        sd0 = float(np.sqrt(1.0 / (n2 * q2 * (1.0 - q2)) + 1.0 / (n1 * q1 * (1.0 - q1))))
    else:
        sd0 = float(np.sqrt(_variance(q1, q2, q1, q2, n1, n2, scale, bound)))
    return mean, sd1, sd0, (q1, q2)


def one_sided_power(p1, p2, n1, n2, scale, bound, upper: bool, z_a: float, mn: bool) -> float:
    """Normal-approximation power of one score test against ``bound`` (``upper``: rejects above)."""
    mean, sd1, sd0, _ = normal_parts(p1, p2, n1, n2, scale, bound)
    if mn:
        sd0 *= np.sqrt((n1 + n2) / (n1 + n2 - 1.0))
    gap = mean if upper else -mean
    return float(special.ndtr((gap - z_a * sd0) / sd1))


# --- exact enumeration ----------------------------------------------------------------------


def reject_grid(n1: int, n2: int, scale: str, aim: str, margin: float, higher: bool, alpha: float):
    """Boolean (n1 + 1) × (n2 + 1) table: does the one-sided score test (TOST for equivalence)
    at level ``alpha`` reject for x1 control and x2 treatment events?"""
    x1 = np.arange(n1 + 1)[:, None]
    x2 = np.arange(n2 + 1)[None, :]
    crit = float(special.ndtri(1.0 - alpha))
    if aim == "noninferiority":
        z = score_z(x1, n1, x2, n2, scale, margin, mn=True)
        return z > crit if higher else z < -crit
    lower = score_z(x1, n1, x2, n2, scale, -margin, mn=True) > crit
    upper = score_z(x1, n1, x2, n2, scale, margin, mn=True) < -crit
    return lower & upper


def enumerated_power(reject: np.ndarray, p1: float, p2: float) -> float:
    """P(reject) when x1 ~ Bin(n1, p1) and x2 ~ Bin(n2, p2), summed over the whole table."""
    n1, n2 = reject.shape[0] - 1, reject.shape[1] - 1
    f1 = stats.binom.pmf(np.arange(n1 + 1), n1, p1)
    f2 = stats.binom.pmf(np.arange(n2 + 1), n2, p2)
    return float(min(max(f1 @ reject.astype(float) @ f2, 0.0), 1.0))


# --- the exact unconditional test -------------------------------------------------------------

NUISANCE_POINTS = 100  # grid points of the nuisance (control) proportion for the maximized p


def nuisance_grid(scale: str, bound: float, points: int = NUISANCE_POINTS) -> np.ndarray:
    """Control proportions on the null boundary (treatment = the bound's partner in [0, 1])."""
    if scale == "difference":
        lo, hi = max(0.0, -bound), min(1.0, 1.0 - bound)
    elif scale == "risk_ratio":
        lo, hi = 0.0, min(1.0, float(np.exp(-bound)))
    else:
        lo, hi = 0.0, 1.0
    # the ends are kept: the supremum of a tail probability can sit at a degenerate boundary
    return np.linspace(lo, hi, points)


def unconditional_pvalues(n1: int, n2: int, scale: str, bound: float, upper: bool) -> np.ndarray:
    """Exact unconditional p-values of the one-sided MN score test of contrast = ``bound``.

    For each table, the largest (over a grid of the nuisance control proportion on the null
    boundary) probability of a table at least as extreme as it: Suissa & Shuster (1985) with the
    score statistic's ordering (Barnard's approach; Chan 1998 for a margin). The supremum is
    taken over ``NUISANCE_POINTS`` grid points, not found by optimization.
    """
    x1 = np.arange(n1 + 1)[:, None]
    x2 = np.arange(n2 + 1)[None, :]
    z = score_z(x1, n1, x2, n2, scale, bound, mn=True)
    t = (z if upper else -z).ravel()
    order = np.argsort(-t, kind="stable")
    ts = t[order]
    # tables tied with the observed one count as "at least as extreme"
    last = np.searchsorted(-ts, -ts, side="right") - 1
    grid = nuisance_grid(scale, bound)
    best = np.zeros(t.size)
    k1 = np.arange(n1 + 1)
    k2 = np.arange(n2 + 1)
    for part in np.array_split(grid, max(1, grid.size // 25)):
        with np.errstate(divide="ignore", invalid="ignore"):
            q2 = at_bound(part, bound, scale)
        # an odds ratio's boundary at p1 = 1 is p2 = 1 (the odds are infinite on both sides)
        q2 = np.clip(np.where(np.isnan(q2), part, q2), 0.0, 1.0)
        f1 = stats.binom.pmf(k1[None, :], n1, part[:, None])  # (g, n1 + 1)
        f2 = stats.binom.pmf(k2[None, :], n2, q2[:, None])  # (g, n2 + 1)
        probs = (f1[:, :, None] * f2[:, None, :]).reshape(part.size, -1)[:, order]
        tail = np.cumsum(probs, axis=1)[:, last]
        np.maximum(best, tail.max(axis=0), out=best)
    out = np.empty(t.size)
    out[order] = np.minimum(best, 1.0)
    return out.reshape(n1 + 1, n2 + 1)


def unconditional_reject_grid(
    n1: int, n2: int, scale: str, aim: str, margin: float, higher: bool, alpha: float
) -> np.ndarray:
    """Rejection table of the exact unconditional score test (TOST for equivalence)."""
    if aim == "noninferiority":
        return unconditional_pvalues(n1, n2, scale, margin, higher) <= alpha
    lower = unconditional_pvalues(n1, n2, scale, -margin, True) <= alpha
    upper = unconditional_pvalues(n1, n2, scale, margin, False) <= alpha
    return lower & upper


@lru_cache(maxsize=32)
def cached_reject_grid(
    exact: bool, n1: int, n2: int, scale: str, aim: str, margin: float, higher: bool, alpha: float
) -> np.ndarray:
    """The rejection table of the asymptotic (``exact`` false) or the exact unconditional score
    test, kept for the n search and the record's power at the same sizes (read-only)."""
    make = unconditional_reject_grid if exact else reject_grid
    out = make(n1, n2, scale, aim, margin, higher, alpha)
    out.setflags(write=False)
    return out
