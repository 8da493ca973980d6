"""Simon's (1989) two-stage single-arm designs by exact enumeration.

Stage 1 treats n1 patients and stops (the treatment is not promising) when at most r1 respond;
otherwise n − n1 more are treated and the treatment is called promising when more than r of all
n respond. With X1 ~ Bin(n1, p) and X2 ~ Bin(n − n1, p):

    P(promising | p) = Σ_{x1 > r1} P(X1 = x1) · P(X2 > r − x1),   PET(p) = P(X1 ≤ r1),
    E(N | p) = n1 + (1 − PET(p)) · (n − n1).

A design is admissible when P(promising | p0) ≤ alpha and P(promising | p1) ≥ power. For each
(n, n1, r1) the smallest r meeting the alpha constraint gives the most power, and E(N | p0) does
not depend on r, so it is enough to take that r. The *optimal* design has the smallest E(N | p0);
the *minimax* design the smallest n, and among those the smallest E(N | p0).

The enumeration is vectorized: for each n, one array over (n1, x1, r) holds the stage-2 tails,
and a reversed cumulative sum over x1 gives P(promising) for every (n1, r1, r) at once.
"""

from __future__ import annotations

import functools
from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats

from .errors import QuestionError
from .exact_binomial import pmf_table

LARGEST_N = 250  # the enumeration's cost grows as n⁴; beyond this another design is needed
_BLOCK = 2_000_000  # array elements per block of n1 values (bounds the working memory)
_TOL = 1e-12  # an error rate equal to alpha, up to float rounding, meets the constraint


@dataclass(frozen=True)
class StageRules:
    """One two-stage design and its operating characteristics."""

    n1: int
    r1: int
    n: int
    r: int
    type_i_error: float  # P(promising | p0)
    power: float  # P(promising | p1)
    pet_null: float  # P(early termination | p0)
    expected_n_null: float  # E(N | p0)
    pet_alternative: float  # P(early termination | p1)
    expected_n_alternative: float  # E(N | p1)

    def to_dict(self) -> dict:
        return asdict(self)


def operating(n1: int, r1: int, n: int, r: int, p: float) -> tuple[float, float, float]:
    """Return (P(promising), PET, E(N)) of the design r1/n1, r/n when the response rate is p."""
    x1 = np.arange(r1 + 1, n1 + 1)
    promising = float(np.sum(stats.binom.pmf(x1, n1, p) * stats.binom.sf(r - x1, n - n1, p)))
    pet = float(stats.binom.cdf(r1, n1, p))
    return promising, pet, n1 + (1.0 - pet) * (n - n1)


def rules(n1: int, r1: int, n: int, r: int, p0: float, p1: float) -> StageRules:
    """Return the operating characteristics of a given design under p0 and p1."""
    a, pet0, en0 = operating(n1, r1, n, r, p0)
    b, pet1, en1 = operating(n1, r1, n, r, p1)
    return StageRules(n1, r1, n, r, a, b, pet0, en0, pet1, en1)


class _Tables:
    """Binomial tables for every size up to ``top`` at one rate, computed once per search.

    pmf[m, k] = P(Bin(m, p) = k); tail[m, k + top] = P(Bin(m, p) > k) for k = −top … top.
    """

    def __init__(self, top: int, p: float):
        self.top = top
        self.pmf = pmf_table(top, p)
        upper = 1.0 - np.cumsum(self.pmf, axis=1)  # P(X > k), k = 0 … top
        upper = np.clip(upper, 0.0, 1.0)
        upper[np.arange(top + 1)[:, None] <= np.arange(top + 1)[None, :]] = 0.0
        self.tail = np.concatenate([np.ones((top + 1, top)), upper], axis=1)


def _promising(n: int, n1: np.ndarray, t: _Tables, k: int) -> np.ndarray:
    """P(promising) over (n1, r1, r) for one total n, r1 and r in 0 … k − 1: shape (A, k, k).

    Only r < k can keep the power (the promising event lies inside {X1 + X2 > r}), so the stage-1
    counts x1 ≥ k, for which X1 + X2 > r is certain, add P(X1 ≥ k) as one number per n1.
    """
    x1 = np.arange(k)
    b1 = t.pmf[n1][:, :k]  # (A, k); 0 where x1 > n1
    beyond = 1.0 - b1.sum(axis=1)  # P(X1 ≥ k)
    width = t.tail.shape[1]
    # tail[n − n1, r − x1 + top], gathered flat: one index array over (n1, x1, r)
    index = ((n - n1) * width)[:, None, None] + (np.arange(k)[None, :] - x1[:, None] + t.top)
    m = b1[:, :, None] * np.take(t.tail, index)  # P(X1 = x1, X2 > r − x1)
    # Σ over r1 < x1 < k: the reversed cumulative sum from x1 = r1 + 1 up
    rev = np.cumsum(m[:, ::-1, :], axis=1)[:, ::-1, :]
    out = np.zeros_like(rev)
    out[:, :-1, :] = rev[:, 1:, :]
    return out + np.clip(beyond, 0.0, 1.0)[:, None, None]


def _best_per_n(n: int, t0: _Tables, t1: _Tables, alpha: float, target: float, n1_below: float):
    """For one n: arrays (n1, r1, r, EN0) of the admissible designs with the smallest r each.

    Only n1 < ``n1_below`` is enumerated (E(N | p0) ≥ n1, so a larger n1 cannot beat the best
    design found so far), and only r < k, k the number of r with P(Bin(n, p1) > r) ≥ power.
    """
    found = []
    top = int(min(n - 1, np.ceil(n1_below) - 1)) if np.isfinite(n1_below) else n - 1
    k = int(np.count_nonzero(t1.tail[n, t1.top : t1.top + n] >= target - _TOL))
    if top < 1 or k < 1:
        return None
    step = max(1, _BLOCK // (k * k))
    for lo in range(1, top + 1, step):
        n1 = np.arange(lo, min(lo + step, top + 1))
        a = _promising(n, n1, t0, k)
        meets = a <= alpha + _TOL  # decreasing in r
        has = meets.any(axis=2)
        r = np.argmax(meets, axis=2)  # the smallest r meeting alpha
        b = np.take_along_axis(_promising(n, n1, t1, k), r[:, :, None], axis=2)[:, :, 0]
        r1 = np.arange(k)[None, :]
        # for r ≤ r1 the rule "more than r1 in stage 1" already decides: the same design as r1
        r = np.maximum(r, r1)
        ok = has & (b >= target - _TOL) & (r1 < n1[:, None]) & (r < n)
        if not ok.any():
            continue
        pet = np.cumsum(t0.pmf[n1][:, :k], axis=1)  # P(X1 ≤ r1)
        en = n1[:, None] + (1.0 - pet) * (n - n1[:, None])
        i, j = np.nonzero(ok)
        found.append((n1[i], j, r[i, j], en[i, j]))
    if not found:
        return None
    return tuple(np.concatenate(parts) for parts in zip(*found, strict=True))


@functools.lru_cache(maxsize=64)
def search(p0: float, p1: float, alpha: float, target: float, max_n: int) -> dict:
    """Return {"optimal": StageRules, "minimax": StageRules, "searched_max_n": max_n}.

    Every n from 2 to ``max_n`` is enumerated; QuestionError on ``analysis_options.max_n`` when
    no admissible design exists in that range.
    """
    best_en = None
    minimax = None
    t0, t1 = _Tables(max_n, p0), _Tables(max_n, p1)
    for n in range(2, max_n + 1):
        # minimax needs every n1 until its n is found; then only what can beat the best E(N)
        bound = np.inf if minimax is None else best_en[0]
        got = _best_per_n(n, t0, t1, alpha, target, bound)
        if got is None:
            continue
        n1, r1, r, en = got
        k = int(np.argmin(en))  # ties: the first, i.e. the smallest n1 (then r1)
        design = (float(en[k]), n, int(n1[k]), int(r1[k]), int(r[k]))
        if minimax is None:
            minimax = design
        if best_en is None or design[0] < best_en[0] - 1e-12:
            best_en = design
    if minimax is None:
        raise QuestionError(
            "analysis_options.max_n",
            f"no two-stage design up to n = {max_n} reaches the target power at this alpha; "
            f"raise max_n (at most {LARGEST_N}) or plan for a larger difference between p and "
            "p_null",
        )

    def as_rules(d) -> StageRules:
        _, n, n1, r1, r = d
        return rules(n1, r1, n, r, p0, p1)

    return {"optimal": as_rules(best_en), "minimax": as_rules(minimax), "searched_max_n": max_n}
