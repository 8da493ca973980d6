"""One mean against a null value, and paired means (the same t test on the differences)."""

from __future__ import annotations

import math

from ..errors import QuestionError
from ..quantiles import effect_value, solve_effect_or_raise, solve_n_or_raise, t_power
from . import Design, Solution
from .common import (
    analytic_method,
    check_formula,
    check_superiority,
    design_from,
    hypothesis,
    one_arm,
    one_arm_allocation,
    positive_effect,
    sides,
)


def _make(name: str, sd_field: str) -> Design:
    """Build the design for a single-sample t test whose SD is ``effect[sd_field]``."""

    def _check(q: dict) -> float:
        """Return the SD, refusing hypotheses and formulas this design lacks."""
        check_superiority(q, name)
        check_formula(q, name)
        return positive_effect(q, sd_field)

    def _power_at(q: dict, delta: float, n: float, alpha: float) -> float:
        """Return the exact power for true difference ``delta`` at n."""
        sd = _check(q)
        return t_power(abs(delta) * math.sqrt(n) / sd, n - 1.0, alpha, sides(q))

    arms = one_arm
    allocation = one_arm_allocation

    def solve_n(q: dict, alpha: float) -> Solution:
        """Return the unrounded n reaching the target power (root of the exact curve)."""
        delta = effect_value(q, "difference")
        _check(q)
        if delta == 0:
            raise QuestionError("effect.difference", "must differ from 0; got 0")
        n = solve_n_or_raise(
            lambda n: _power_at(q, delta, n, alpha),
            float(q["target_power"]),
            1.5,
            field="effect.difference",
            value=delta,
        )
        return Solution(per_arm=[n])

    def power(q: dict, per_arm: list[float], alpha: float) -> float:
        """Return the exact power at the given (possibly fractional) n."""
        delta = effect_value(q, "difference")
        return _power_at(q, delta, float(per_arm[0]), alpha)

    def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
        """Return the smallest difference reaching the target power at n."""
        sd = _check(q)
        n = float(per_arm[0])
        x = solve_effect_or_raise(
            lambda d: _power_at(q, d, n, alpha),
            float(q["target_power"]),
            per_arm,
            hi=4.0 * sd / math.sqrt(n),
        )
        higher = hypothesis(q)[2]
        return {"field": "difference", "value": x if higher else -x}

    def describe(q: dict) -> dict:
        """Return the analytic method block for the record."""
        what = "the within-pair differences" if name == "paired_mean" else "one sample"
        notes = [
            f"t test on {what} with n − 1 degrees of freedom; noncentrality difference·√n / SD.",
            "Power counts both rejection tails for a two-sided test; a one-sided test looks in "
            "the direction of the assumed difference.",
        ]
        if name == "paired_mean":
            notes.append(
                "The SD is that of the differences; from a common SD σ and within-pair "
                "correlation ρ it is σ·√(2(1 − ρ))."
            )
        formula = "one sample" if name == "one_mean" else "paired differences"
        return analytic_method(
            f"noncentral t ({formula})",
            "Cohen (1988), ch. 2; Guenther (1981), Am Stat 35:243",
            notes,
        )

    return design_from(name, locals())


DESIGN = _make("one_mean", "sd")
PAIRED = _make("paired_mean", "sd_difference")
