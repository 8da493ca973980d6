"""Wilcoxon–Mann–Whitney rank-sum test: Noether's (1987) total from P(Y > X)."""

from __future__ import annotations

import math

from ..errors import QuestionError
from ..quantiles import normal_effect, normal_power, power_unreachable, z_alpha, z_sum
from . import Solution
from .common import (
    analytic_method,
    check_formula,
    check_superiority,
    design_from,
    effect_between,
    hypothesis,
    sides,
    two_arm_allocation,
    two_arms,
)

arms = two_arms
allocation = two_arm_allocation


def _p(q: dict) -> float:
    """Return P(Y > X), checked to lie strictly between 0 and 1."""
    return effect_between(q, "prob_superiority", 0.0, 1.0)


def _check(q: dict) -> None:
    """Refuse formulas and hypotheses this design does not offer."""
    check_formula(q, "rank_sum")
    check_superiority(q, "rank_sum")


def _shift(p: float, n1: float, n2: float) -> float:
    """Return the standardized mean of the rank-sum statistic under the alternative."""
    total = n1 + n2
    c = n1 / total
    return math.sqrt(12.0 * c * (1.0 - c) * total) * abs(p - 0.5)


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per arm from N = (z_a + z_b)² / (12·c(1 − c)·(p − ½)²), c = n1/N."""
    _check(q)
    p = _p(q)
    if p == 0.5:
        raise QuestionError("effect.prob_superiority", "must differ from 0.5 (no effect); got 0.5")
    w = allocation(q)
    c = w[0] / sum(w)
    z_total = z_sum(alpha, sides(q), float(q["target_power"]))
    total = z_total**2 / (12.0 * c * (1.0 - c) * (p - 0.5) ** 2)
    return Solution(per_arm=[c * total, (1.0 - c) * total], extra={"total_raw": total})


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return Noether's normal-approximation power at the given n per arm."""
    _check(q)
    shift = _shift(_p(q), float(per_arm[0]), float(per_arm[1]))
    return normal_power(shift, z_alpha(alpha, sides(q)), sides(q))


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return P(Y > X) nearest ½ (above unless lower is better) reaching the target power."""
    _check(q)
    n1, n2 = float(per_arm[0]), float(per_arm[1])
    z_a = z_alpha(alpha, sides(q))
    target = float(q["target_power"])
    unit = _shift(1.0, n1, n2) / 0.5  # shift per unit of |p − ½|
    # |p − ½| cannot exceed ½; beyond that no effect reaches the target at this n.
    if normal_power(unit * 0.5, z_a, sides(q)) <= target:
        raise power_unreachable("sample_size.per_arm", target, per_arm)
    x = normal_effect(unit, z_a, sides(q), target, 0.5)
    higher = hypothesis(q)[2]
    return {"field": "prob_superiority", "value": 0.5 + x if higher else 0.5 - x}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    return analytic_method(
        "Noether's normal approximation for the rank-sum test",
        "Noether (1987), JASA 82:645",
        [
            "The effect is P(Y > X) with Y from the treatment arm; the total N is split by the "
            "allocation, c = n_control / N.",
            "Against the t test on normal data the rank-sum test keeps 3/π ≈ 95.5% efficiency "
            "(Hodges & Lehmann 1956).",
        ],
    )


DESIGN = design_from("rank_sum", globals())
