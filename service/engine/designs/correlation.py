"""A Pearson correlation against a null value r0, by Fisher's z transformation."""

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
    one_arm,
    one_arm_allocation,
    sides,
)

arms = one_arm
allocation = one_arm_allocation


def _r(q: dict, name: str, default: float | None = None) -> float:
    """Return a correlation from the effect, checked to lie strictly between −1 and 1."""
    return effect_between(q, name, -1.0, 1.0, default=default)


def _check(q: dict) -> None:
    """Refuse formulas and hypotheses this design does not offer."""
    check_formula(q, "correlation")
    check_superiority(q, "correlation")


def _pairs(per_arm: list[float]) -> float:
    """Return the number of pairs, checked to exceed 3 (Fisher z's variance is 1/(n − 3))."""
    n = float(per_arm[0])
    if not n > 3:
        raise QuestionError("sample_size.per_arm", f"Fisher z needs more than 3 pairs; got {n:g}")
    return n


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded number of pairs, n = ((z_a + z_b) / |atanh r − atanh r0|)² + 3."""
    _check(q)
    r, r0 = _r(q, "r"), _r(q, "r0", 0.0)
    if r == r0:
        raise QuestionError("effect.r", f"must differ from r0 ({r0:g}); got {r:g}")
    shift = abs(math.atanh(r) - math.atanh(r0))
    n = (z_sum(alpha, sides(q), float(q["target_power"])) / shift) ** 2 + 3.0
    return Solution(per_arm=[n], extra={"fisher_z_difference": shift})


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return the Fisher-z power at the given number of pairs (n > 3)."""
    _check(q)
    r, r0 = _r(q, "r"), _r(q, "r0", 0.0)
    n = _pairs(per_arm)
    shift = abs(math.atanh(r) - math.atanh(r0)) * math.sqrt(n - 3.0)
    return normal_power(shift, z_alpha(alpha, sides(q)), sides(q))


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return the correlation nearest r0 (above it unless lower is better) reaching target power."""
    _check(q)
    r0 = _r(q, "r0", 0.0)
    n = _pairs(per_arm)
    target = float(q["target_power"])
    # Solve on the z scale (unbounded), then map back; the far tail keeps this a root search.
    x = normal_effect(math.sqrt(n - 3.0), z_alpha(alpha, sides(q)), sides(q), target, 50.0)
    higher = hypothesis(q)[2]
    value = math.tanh(math.atanh(r0) + (x if higher else -x))
    if not -1.0 < value < 1.0:
        raise power_unreachable("sample_size.per_arm", target, per_arm)
    return {"field": "r", "value": value}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    return analytic_method(
        "Fisher z transformation, normal approximation",
        "Fisher (1921); Cohen (1988), ch. 3",
        [
            "atanh(r̂) is taken as normal with variance 1/(n − 3).",
            "For strong correlations Fisher z and Cohen's table part company: at r = 0.5 the "
            "formula gives 29.01 (30 rounded up) where Cohen (1988, Table 3.4.1) prints 28.",
        ],
    )


DESIGN = design_from("correlation", globals())
