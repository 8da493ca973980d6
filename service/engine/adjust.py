"""Adjustment steps shared by every design: Bonferroni alpha, rounding, dropout.

Inflating goes raw n → whole subjects → ÷ (1 − dropout); deflating walks the same steps
backwards to turn enrolled numbers into the effective n the power functions use. Cluster
randomization changes the unit (whole clusters, cluster-level df) and lives in cluster.py.
"""

from __future__ import annotations

import math
from fractions import Fraction

# Floating error can leave 64.0000000001 where the algebra says 64; do not round that up to 65.
_EPS = 1e-9


def _ceil(x: float) -> int:
    """Round up, ignoring floating-point noise just above an integer."""
    return int(math.ceil(x - _EPS))


def _adjustments(q: dict) -> dict:
    """Return the question's adjustments block with defaults for anything missing."""
    adj = q.get("adjustments") or {}
    return {
        "dropout": float(adj.get("dropout") or 0.0),
        "cluster": adj.get("cluster"),
        "comparisons": int(adj.get("comparisons") or 1),
    }


def alpha_for(q: dict) -> tuple[float, dict | None]:
    """Return the alpha per comparison (Bonferroni) and its step record (None for one comparison)."""
    alpha = float(q["alpha"])
    k = _adjustments(q)["comparisons"]
    if k <= 1:
        return alpha, None
    per = alpha / k
    return per, {
        "step": "bonferroni",
        "comparisons": k,
        "alpha": alpha,
        "alpha_per_comparison": per,
    }


def ratio_fraction(ratio: float, max_denominator: int = 100) -> Fraction | None:
    """Return treatment:control ``ratio`` as an exact small fraction, or None when it is not one."""
    frac = Fraction(float(ratio)).limit_denominator(max_denominator)
    return frac if abs(float(frac) - float(ratio)) <= 1e-9 * max(1.0, float(ratio)) else None


def _whole(values: list[float], q: dict, floor: int = 0) -> list[int]:
    """Round sizes up to whole subjects, each group alone or keeping the allocation ratio exact.

    exact_ratio takes the smallest multiple k of the ratio's parts (control c, treatment t with
    t/c the ratio) with c·k and t·k each at least the size asked for.
    """
    if q.get("allocation_rounding") != "exact_ratio" or len(values) != 2:
        return [max(floor, _ceil(float(x))) for x in values]
    frac = ratio_fraction(float(q.get("allocation_ratio") or 1.0))
    if frac is None:  # the schema refuses this; keep each-group rounding as the safe fallback
        return [max(floor, _ceil(float(x))) for x in values]
    c, t = frac.denominator, frac.numerator
    k = max(_ceil(float(values[0]) / c), _ceil(float(values[1]) / t), _ceil(floor / min(c, t)))
    return [c * k, t * k]


def inflate(raw_per_group: list[float], q: dict) -> tuple[list[int], list[dict]]:
    """Turn raw n per group into enrolled whole subjects: ceil, ÷ (1 − dropout)."""
    adj = _adjustments(q)
    # Fewer than 2 per group cannot estimate a variance; small raw answers are lifted to 2.
    per_group = _whole([float(x) for x in raw_per_group], q, floor=2)
    steps: list[dict] = [
        {
            "step": "base",
            "per_group_raw": [float(x) for x in raw_per_group],
            "per_group": list(per_group),
            "rounding": q.get("allocation_rounding") or "each_group",
        }
    ]
    rate = adj["dropout"]
    if rate > 0:
        # Enrol n / (1 − q) so that n remain after a fraction q drop out (n·(1 + q) keeps too few).
        per_group = _whole([n / (1.0 - rate) for n in per_group], q)
        steps.append({"step": "dropout", "rate": rate, "per_group": list(per_group)})
    return per_group, steps


def deflate(enrolled_per_group: list[int], q: dict) -> tuple[list[float], list[dict]]:
    """Turn enrolled n per group into the effective n for power: × (1 − dropout)."""
    adj = _adjustments(q)
    per_group = [float(n) for n in enrolled_per_group]
    steps: list[dict] = [{"step": "enrolled", "per_group": [int(n) for n in enrolled_per_group]}]
    rate = adj["dropout"]
    if rate > 0:
        per_group = [n * (1.0 - rate) for n in per_group]
        steps.append({"step": "dropout", "rate": rate, "per_group": list(per_group)})
    return per_group, steps


def split_total(total: int, allocation: list[float]) -> list[int]:
    """Split ``total`` subjects over groups in proportion to ``allocation`` by largest remainders."""
    weights = [float(a) for a in allocation]
    s = sum(weights)
    quotas = [total * w / s for w in weights]
    parts = [int(math.floor(x)) for x in quotas]
    left = total - sum(parts)
    # Ties go to the earlier group (control first) so the split is deterministic.
    order = sorted(range(len(quotas)), key=lambda i: (-(quotas[i] - parts[i]), i))
    for i in order[:left]:
        parts[i] += 1
    return parts
