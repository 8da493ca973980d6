"""Exact binomial tests by enumeration, vectorized over sample sizes: critical counts, power and
the saw-toothed sample-size search of a single-stage test of one proportion.

The test of H0: p = p0 rejects when the count X is at or beyond a critical count. One-sided
(``direction`` +1, looking for a higher rate): X ≥ c_hi, with c_hi the smallest count whose upper
tail P0(X ≥ c_hi) ≤ alpha. Looking lower (−1): X ≤ c_lo, the largest count with P0(X ≤ c_lo) ≤
alpha. Two-sided: both, each tail at alpha/2 (the equal-tailed test: the p-value is twice the
smaller tail, capped at 1). Tails are scipy's regularized incomplete beta values, so the power is
the exact binomial sum to float precision.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import special, stats

from .errors import QuestionError

# The largest n the search looks at (a rate this close to the reference needs another design).
MAX_N = 2_000_000
SMALLEST = 2  # a study of one is no study; the schema's smallest posted size


def critical_counts(
    n: np.ndarray, p0: float, alpha: float, tails: int, direction: int
) -> tuple[np.ndarray, np.ndarray]:
    """Return (c_lo, c_hi) per n: reject when X ≤ c_lo or X ≥ c_hi (−1 or n + 1 when unused)."""
    n = np.asarray(n, dtype=np.int64)
    a = alpha / 2.0 if tails == 2 else alpha
    lo = np.full(n.shape, -1, dtype=np.int64)
    hi = n + 1
    if tails == 2 or direction > 0:
        # smallest c with P0(X ≥ c) ≤ a; isf's answer is checked against the tail itself
        c = np.asarray(stats.binom.isf(a, n, p0), dtype=np.float64)
        c = np.where(np.isnan(c), n, c).astype(np.int64) + 1
        c = np.where(stats.binom.sf(c - 2, n, p0) <= a, c - 1, c)
        c = np.where(stats.binom.sf(c - 1, n, p0) > a, c + 1, c)
        hi = np.minimum(c, n + 1)
    if tails == 2 or direction < 0:
        # largest c with P0(X ≤ c) ≤ a
        c = np.asarray(stats.binom.ppf(a, n, p0), dtype=np.float64)
        c = np.where(np.isnan(c), 0, c).astype(np.int64)
        c = np.where(stats.binom.cdf(c, n, p0) > a, c - 1, c)
        c = np.where(stats.binom.cdf(c + 1, n, p0) <= a, c + 1, c)
        lo = np.maximum(c, -1)
    return lo, hi


def power(
    n: np.ndarray, p: float, p0: float, alpha: float, tails: int, direction: int
) -> np.ndarray:
    """Return the exact power at true rate ``p`` for every n in ``n`` (vectorized)."""
    n = np.asarray(n, dtype=np.int64)
    lo, hi = critical_counts(n, p0, alpha, tails, direction)
    upper = np.where(hi <= n, stats.binom.sf(hi - 1, n, p), 0.0)
    lower = np.where(lo >= 0, stats.binom.cdf(lo, n, p), 0.0)
    return np.asarray(upper + lower, dtype=np.float64)


def reject(
    x: np.ndarray, n: int, p0: float, alpha: float, tails: int, direction: int
) -> np.ndarray:
    """Return the exact test's decisions for counts ``x`` out of ``n`` (vectorized over x)."""
    lo, hi = critical_counts(np.array([n]), p0, alpha, tails, direction)
    return (x <= lo[0]) | (x >= hi[0])


@dataclass(frozen=True)
class Search:
    """The two answers of a saw-toothed power curve.

    first_reaching : the smallest n whose power reaches the target.
    stays_above_from : the smallest n from which every larger n checked reaches it.
    checked_through : the largest n checked (the stretch above stays_above_from is all above).
    dips : the n between the two whose power falls below the target again.
    """

    first_reaching: int
    stays_above_from: int
    checked_through: int
    dips: list[int]


def search_n(
    p: float,
    p0: float,
    alpha: float,
    tails: int,
    direction: int,
    target: float,
    start: float,
    *,
    field: str = "effect.p",
) -> Search:
    """Return both saw-tooth answers of the one-proportion exact test (see ``first_and_stays``)."""
    return first_and_stays(
        lambda n: power(n, p, p0, alpha, tails, direction), target, start, field=field
    )


def first_and_stays(
    curve: Callable[[np.ndarray], np.ndarray],
    target: float,
    start: float,
    *,
    field: str,
    limit: int = MAX_N,
) -> Search:
    """Return both answers of a saw-toothed power curve, enumerating n = 2 … cap at once.

    ``curve`` maps an array of sizes to their powers; ``start`` is a first guess (a normal
    approximation). The curve is evaluated up to twice the first n reaching the target (at least
    40 further sizes); every n from stays_above_from up to that cap reaches the target.
    """
    top = int(min(max(2.0 * start, 50.0), limit))
    while True:
        n = np.arange(SMALLEST, top + 1)
        ok = curve(n) >= target
        if ok.any():
            first = int(n[np.argmax(ok)])
            cap = max(2 * first, first + 40)
            if cap <= top:
                keep = n <= cap
                n, ok = n[keep], ok[keep]
                # the last n below the target, plus one; the run after it is all above
                below = n[~ok]
                stays = int(below[-1] + 1) if below.size else SMALLEST
                dips = [int(k) for k in below if first < k < stays]
                return Search(first, stays, cap, dips)
        if top >= limit:
            raise QuestionError(
                field,
                f"no sample size up to {limit:,} reaches the target power with the exact test; "
                "the effect is too small for an exact search (the normal approximation answers)",
            )
        top = min(top * 2, limit)


def pmf_table(top: int, p: float) -> np.ndarray:
    """Row m (0 … top), column k (0 … top): P(X = k) for X ~ Bin(m, p); 0 where k > m.

    From log-gamma in one array expression (scipy's binomial pmf called element by element is
    the slow part of an enumeration); exact to about 1e-13 relative.
    """
    m = np.arange(top + 1)[:, None]
    k = np.arange(top + 1)[None, :]
    lg = special.gammaln(np.arange(top + 2, dtype=np.float64))  # lg[i] = ln((i − 1)!)
    inside = k <= m
    j = np.where(inside, m - k, 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        log = lg[m + 1] - lg[k + 1] - lg[j + 1] + special.xlogy(k, p) + special.xlog1py(j, -p)
    return np.where(inside, np.exp(log), 0.0)


def conditional_power(
    n: np.ndarray, psi: float, theta: float, alpha: float, tails: int, direction: int
) -> np.ndarray:
    """Exact power of the conditional test of matched pairs (the exact McNemar test), per n.

    The discordant pairs D ~ Bin(n, psi); given D = d, those favoring treatment X ~ Bin(d, theta)
    and the test is the exact binomial test of X against 1/2. Power = Σ_d P(D = d)·P(reject | d),
    an (n, d) array summed over d.
    """
    n = np.asarray(n, dtype=np.int64)
    d = np.arange(int(n.max()) + 1)
    lo, hi = critical_counts(d, 0.5, alpha, tails, direction)
    given = np.where((hi <= d) & (d > 0), stats.binom.sf(hi - 1, d, theta), 0.0)
    given += np.where((lo >= 0) & (d > 0), stats.binom.cdf(lo, d, theta), 0.0)
    by_size = pmf_table(int(n.max()), psi) @ given  # row m: Σ_d P(D = d | m pairs)·P(reject | d)
    return by_size[n]
