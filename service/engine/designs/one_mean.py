"""One mean against a null value, and paired means (the same t test on the differences)."""

from __future__ import annotations

import math

from ..errors import QuestionError
from ..quantiles import effect_value, power_unreachable, solve_increasing, solve_n_or_raise, t_power
from . import TESTS, Design, Solution


def _make(name: str, sd_field: str, formulas: tuple[str, ...]) -> Design:
    """Build the design for a single-sample t test whose SD is ``effect[sd_field]``."""

    def _check(q: dict) -> tuple[float, float]:
        """Return (sd, sides), refusing hypotheses and formulas this design lacks."""
        kind = (q.get("hypothesis") or {}).get("kind", "superiority")
        if kind != "superiority":
            raise QuestionError(
                "hypothesis.kind", f"'{kind}' is not offered for {name}; only superiority"
            )
        formula = q.get("formula") or formulas[0]
        if formula not in formulas:
            raise QuestionError(
                "formula", f"'{formula}' is not offered for {name}; use one of {list(formulas)}"
            )
        sd = effect_value(q, sd_field)
        if not sd > 0:
            raise QuestionError(f"effect.{sd_field}", f"must be greater than 0; got {sd:g}")
        return sd, float(q.get("sides", 2))

    def _power_at(q: dict, delta: float, n: float, alpha: float) -> float:
        """Return the exact power for true difference ``delta`` at n."""
        sd, sides = _check(q)
        return t_power(abs(delta) * math.sqrt(n) / sd, n - 1.0, alpha, int(sides))

    def arms(q: dict) -> int:
        """Return the number of arms (one)."""
        return 1

    def allocation(q: dict) -> list[float]:
        """Return the relative arm sizes ([1])."""
        return [1.0]

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
        sd, _ = _check(q)
        n = float(per_arm[0])
        target = float(q["target_power"])
        x = solve_increasing(
            lambda d: _power_at(q, d, n, alpha), target, 0.0, hi=4.0 * sd / math.sqrt(n)
        )
        if x is None:
            raise power_unreachable("sample_size.per_arm", target, per_arm)
        higher = bool((q.get("hypothesis") or {}).get("higher_is_better", True))
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
        return {
            "kind": "analytic",
            "formula": "noncentral t (one sample)"
            if name == "one_mean"
            else "noncentral t (paired differences)",
            "reference": "Cohen (1988), ch. 2; Guenther (1981), Am Stat 35:243",
            "notes": notes,
        }

    return Design(
        name=name,
        formulas=formulas,
        tests=TESTS[name],
        arms=arms,
        allocation=allocation,
        solve_n=solve_n,
        power=power,
        solve_effect=solve_effect,
        describe=describe,
    )


DESIGN = _make("one_mean", "sd", ("noncentral_t",))
PAIRED = _make("paired_mean", "sd_difference", ("noncentral_t",))
