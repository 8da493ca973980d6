"""Holm and Hochberg as alternatives to Bonferroni for ``adjustments.comparisons``.

A question with ``comparisons`` = k > 1 plans each comparison at alpha/k (Bonferroni), and the
size and power in the record are that comparison's. ``adjustments.multiplicity`` may name Holm's
step-down (Holm 1979) or Hochberg's step-up (Hochberg 1988) procedure instead: both reject
whatever Bonferroni rejects, so the Bonferroni size stays valid (and conservative) for them, and
the record gains a ``multiplicity`` block with the procedure's power at that size, for which no
closed formula exists. Scope (stated in the block): k identical comparisons whose z statistics
are independent or equicorrelated (``comparisons_correlation`` ρ ≥ 0, where Hochberg's procedure
keeps its familywise level), each with the drift of the question's own test: the mean δ of a z statistic whose test at α/k
has the question's power there (both tails of a two-sided test counted; the normal
approximation). The k
statistics are simulated, vectorized over replicates, with a fixed documented seed so that an
analytic record stays reproducible; the block gives each procedure's power for a given comparison,
for at least one and for all k, with Monte Carlo errors. Pure: numpy and scipy only.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize
from scipy.special import ndtr, ndtri

from .errors import QuestionError

PROCEDURES = ("bonferroni", "holm", "hochberg")
REPLICATES = 40_000
SEED = 20261202  # fixed: the block is part of an analytic record, which must reproduce
MAX_COMPARISONS = 100
REFERENCE = "Holm (1979) step-down; Hochberg (1988) step-up; Bonferroni split for the size"


def procedure(q: dict) -> str:
    return (q.get("adjustments") or {}).get("multiplicity") or "bonferroni"


def active(q: dict) -> bool:
    """True when the question names Holm or Hochberg for more than one comparison."""
    adj = q.get("adjustments") or {}
    return int(adj.get("comparisons") or 1) > 1 and procedure(q) != "bonferroni"


def check(q: dict) -> None:
    """Refuse what the block cannot answer, naming the field."""
    adj = q.get("adjustments") or {}
    name = procedure(q)
    if name not in PROCEDURES:
        raise QuestionError(
            "adjustments.multiplicity", f"must be one of {', '.join(PROCEDURES)}; got {name!r}"
        )
    k = int(adj.get("comparisons") or 1)
    rho = adj.get("comparisons_correlation")
    if rho is not None and k <= 1:
        raise QuestionError(
            "adjustments.comparisons_correlation",
            "applies only with adjustments.comparisons above 1",
        )
    if rho is not None and name == "bonferroni":
        raise QuestionError(
            "adjustments.comparisons_correlation",
            "applies only with adjustments.multiplicity 'holm' or 'hochberg' (Bonferroni's "
            "split does not depend on it)",
        )
    if name != "bonferroni" and k > MAX_COMPARISONS:
        raise QuestionError(
            "adjustments.comparisons",
            f"Holm and Hochberg are evaluated for up to {MAX_COMPARISONS} comparisons; got {k}",
        )
    if rho is not None and not 0 <= float(rho) < 1:
        raise QuestionError(
            "adjustments.comparisons_correlation",
            f"must be in [0, 1) (independent or positively equicorrelated); got {rho!r}",
        )


def rejections(p: np.ndarray, alpha: float, name: str) -> np.ndarray:
    """Per row of p-values (rows, k), which hypotheses the procedure rejects (same order)."""
    rows, k = p.shape
    order = np.argsort(p, axis=1, kind="stable")
    ranked = np.take_along_axis(p, order, axis=1)
    if name == "bonferroni":
        ranked_reject = ranked <= alpha / k
    else:
        below = ranked <= alpha / (k - np.arange(k))  # p₍ⱼ₎ ≤ α/(k − j + 1)
        if name == "holm":  # step-down: stop at the first ordered p that fails
            ranked_reject = np.cumprod(below, axis=1).astype(bool)
        elif name == "hochberg":  # step-up: reject all up to the largest j that passes
            last = np.where(below.any(axis=1), k - 1 - np.argmax(below[:, ::-1], axis=1), -1)
            ranked_reject = np.arange(k)[None, :] <= last[:, None]
        else:
            raise ValueError(f"unknown procedure {name!r}")
    out = np.empty_like(ranked_reject)
    np.put_along_axis(out, order, ranked_reject, axis=1)
    return out


def drift_of(power: float, level: float, sides: int) -> float:
    """The mean of a z statistic whose test at ``level`` has this power (both tails counted
    when two-sided); 0 at or below the level."""
    z = float(ndtri(1.0 - level / sides))
    if sides == 1:
        return max(0.0, float(ndtri(power)) + z)

    def gap(d: float) -> float:
        return float(ndtr(d - z) + ndtr(-d - z)) - power

    if gap(0.0) >= 0:
        return 0.0
    return float(optimize.brentq(gap, 0.0, 40.0, xtol=1e-12))


def simulate(drift: float, k: int, rho: float, alpha: float, sides: int, reps: int, seed: int):
    """Reject matrices of k equicorrelated z statistics N(drift, 1) under each procedure."""
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed)))
    shared = rng.standard_normal((reps, 1))
    own = rng.standard_normal((reps, k))
    z = drift + math.sqrt(rho) * shared + math.sqrt(1.0 - rho) * own
    p = sides * ndtr(-np.abs(z)) if sides == 2 else ndtr(-z)
    return {name: rejections(p, alpha, name) for name in PROCEDURES}


def _share(x: np.ndarray) -> dict:
    reps = x.size
    est = float(x.mean())
    return {"estimate": est, "mcse": math.sqrt(max(est * (1 - est), 0.0) / reps)}


def block(q: dict, per_comparison_power: float) -> dict:
    """The record's ``multiplicity`` block at the per-comparison (Bonferroni) power."""
    adj = q.get("adjustments") or {}
    k = int(adj["comparisons"])
    rho = float(adj.get("comparisons_correlation") or 0.0)
    alpha = float(q["alpha"])
    sides = 2 if q.get("alternative", "two-sided") == "two-sided" else 1
    power = min(max(float(per_comparison_power), 1e-12), 1.0 - 1e-12)
    drift = drift_of(power, alpha / k, sides)
    found = simulate(drift, k, rho, alpha, sides, REPLICATES, SEED)
    powers = {}
    for name, reject in found.items():
        each = reject.mean(axis=1)  # exchangeable comparisons: the share per replicate
        est = float(each.mean())
        powers[name] = {
            "each": {"estimate": est, "mcse": float(each.std(ddof=1) / math.sqrt(REPLICATES))},
            "any": _share(reject.any(axis=1)),
            "all": _share(reject.all(axis=1)),
        }
    return {
        "procedure": procedure(q),
        "comparisons": k,
        "correlation": rho,
        "alpha": alpha,
        "drift": drift,
        "power": powers[procedure(q)],
        "bonferroni": powers["bonferroni"],
        "replicates": REPLICATES,
        "seed": SEED,
        "method": (
            f"simulation of {k} {'independent' if rho == 0 else f'equicorrelated (ρ = {rho:g})'}"
            " z statistics, each with the drift of the question's test at alpha/k "
            "(normal approximation); the size is Bonferroni's, which the procedure never "
            "rejects less than"
        ),
        "reference": REFERENCE,
    }
