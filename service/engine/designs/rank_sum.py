"""Wilcoxon–Mann–Whitney rank-sum test: Noether's (1987) total from P(Y > X)."""

from __future__ import annotations

import math

from ..errors import QuestionError
from ..quantiles import effect_value, normal_power, power_unreachable, root, z, z_alpha
from . import FORMULAS, TESTS, Design, Solution


def _p(q: dict) -> float:
    """Return P(Y > X), checked to lie strictly between 0 and 1."""
    p = effect_value(q, "prob_superiority")
    if not 0.0 < p < 1.0:
        raise QuestionError(
            "effect.prob_superiority", f"must be strictly between 0 and 1; got {p:g}"
        )
    return p


def _check(q: dict) -> None:
    """Refuse formulas and hypotheses this design does not offer."""
    formula = q.get("formula") or FORMULAS["rank_sum"][0]
    if formula not in FORMULAS["rank_sum"]:
        raise QuestionError(
            "formula",
            f"'{formula}' is not offered for rank_sum; use one of {list(FORMULAS['rank_sum'])}",
        )
    kind = (q.get("hypothesis") or {}).get("kind", "superiority")
    if kind != "superiority":
        raise QuestionError(
            "hypothesis.kind", f"'{kind}' is not offered for rank_sum; only superiority"
        )


def arms(q: dict) -> int:
    """Return the number of arms (two)."""
    return 2


def allocation(q: dict) -> list[float]:
    """Return the relative arm sizes [control, treatment]."""
    return [1.0, float(q.get("allocation_ratio") or 1.0)]


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
    z_a = z_alpha(alpha, int(q.get("sides", 2)))
    total = (z_a + z(float(q["target_power"]))) ** 2 / (12.0 * c * (1.0 - c) * (p - 0.5) ** 2)
    return Solution(per_arm=[c * total, (1.0 - c) * total], extra={"total_raw": total})


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return Noether's normal-approximation power at the given n per arm."""
    _check(q)
    sides = int(q.get("sides", 2))
    return normal_power(
        _shift(_p(q), float(per_arm[0]), float(per_arm[1])), z_alpha(alpha, sides), sides
    )


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return P(Y > X) nearest ½ (above unless lower is better) reaching the target power."""
    _check(q)
    n1, n2 = float(per_arm[0]), float(per_arm[1])
    sides = int(q.get("sides", 2))
    z_a = z_alpha(alpha, sides)
    target = float(q["target_power"])
    unit = _shift(1.0, n1, n2) / 0.5  # shift per unit of |p − ½|
    # |p − ½| cannot exceed ½; beyond that no effect reaches the target at this n.
    if normal_power(unit * 0.5, z_a, sides) <= target:
        raise power_unreachable("sample_size.per_arm", target, per_arm)
    x = root(lambda d: normal_power(unit * d, z_a, sides) - target, 0.0, 0.5)
    higher = bool((q.get("hypothesis") or {}).get("higher_is_better", True))
    return {"field": "prob_superiority", "value": 0.5 + x if higher else 0.5 - x}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    return {
        "kind": "analytic",
        "formula": "Noether's normal approximation for the rank-sum test",
        "reference": "Noether (1987), JASA 82:645",
        "notes": [
            "The effect is P(Y > X) with Y from the treatment arm; the total N is split by the "
            "allocation, c = n_control / N.",
            "Against the t test on normal data the rank-sum test keeps 3/π ≈ 95.5% efficiency "
            "(Hodges & Lehmann 1956).",
        ],
    }


DESIGN = Design(
    name="rank_sum",
    formulas=FORMULAS["rank_sum"],
    tests=TESTS["rank_sum"],
    arms=arms,
    allocation=allocation,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
)
