"""A Pearson correlation against a null value r0, by Fisher's z transformation."""

from __future__ import annotations

import math

from ..errors import QuestionError
from ..quantiles import normal_power, power_unreachable, root, z, z_alpha
from . import FORMULAS, TESTS, Design, Solution


def _r(q: dict, name: str, default: float | None = None) -> float:
    """Return a correlation from the effect, checked to lie strictly between −1 and 1."""
    eff = q.get("effect") or {}
    r = float(eff[name]) if eff.get(name) is not None else default
    if r is None:
        raise QuestionError(f"effect.{name}", "is required for this question")
    if not -1.0 < r < 1.0:
        raise QuestionError(f"effect.{name}", f"must be strictly between -1 and 1; got {r:g}")
    return r


def _check(q: dict) -> None:
    """Refuse formulas and hypotheses this design does not offer."""
    formula = q.get("formula") or FORMULAS["correlation"][0]
    if formula not in FORMULAS["correlation"]:
        raise QuestionError(
            "formula",
            f"'{formula}' is not offered for correlation; use one of {list(FORMULAS['correlation'])}",
        )
    kind = (q.get("hypothesis") or {}).get("kind", "superiority")
    if kind != "superiority":
        raise QuestionError(
            "hypothesis.kind", f"'{kind}' is not offered for correlation; only superiority"
        )


def arms(q: dict) -> int:
    """Return the number of arms (one sample of pairs)."""
    return 1


def allocation(q: dict) -> list[float]:
    """Return the relative arm sizes ([1])."""
    return [1.0]


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded number of pairs, n = ((z_a + z_b) / |atanh r − atanh r0|)² + 3."""
    _check(q)
    r, r0 = _r(q, "r"), _r(q, "r0", 0.0)
    if r == r0:
        raise QuestionError("effect.r", f"must differ from r0 ({r0:g}); got {r:g}")
    shift = abs(math.atanh(r) - math.atanh(r0))
    z_a = z_alpha(alpha, int(q.get("sides", 2)))
    n = ((z_a + z(float(q["target_power"]))) / shift) ** 2 + 3.0
    return Solution(per_arm=[n], extra={"fisher_z_difference": shift})


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return the Fisher-z power at the given number of pairs (n > 3)."""
    _check(q)
    r, r0 = _r(q, "r"), _r(q, "r0", 0.0)
    n = float(per_arm[0])
    if not n > 3:
        raise QuestionError("sample_size.per_arm", f"Fisher z needs more than 3 pairs; got {n:g}")
    shift = abs(math.atanh(r) - math.atanh(r0)) * math.sqrt(n - 3.0)
    return normal_power(shift, z_alpha(alpha, int(q.get("sides", 2))), int(q.get("sides", 2)))


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return the correlation nearest r0 (above it unless lower is better) reaching target power."""
    _check(q)
    r0 = _r(q, "r0", 0.0)
    n = float(per_arm[0])
    if not n > 3:
        raise QuestionError("sample_size.per_arm", f"Fisher z needs more than 3 pairs; got {n:g}")
    target = float(q["target_power"])
    sides = int(q.get("sides", 2))
    z_a = z_alpha(alpha, sides)
    # Solve on the z scale (unbounded), then map back; the far tail keeps this a root search.
    x = root(lambda s: normal_power(s * math.sqrt(n - 3.0), z_a, sides) - target, 0.0, 50.0)
    higher = bool((q.get("hypothesis") or {}).get("higher_is_better", True))
    value = math.tanh(math.atanh(r0) + (x if higher else -x))
    if not -1.0 < value < 1.0:
        raise power_unreachable("sample_size.per_arm", target, per_arm)
    return {"field": "r", "value": value}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    return {
        "kind": "analytic",
        "formula": "Fisher z transformation, normal approximation",
        "reference": "Fisher (1921); Cohen (1988), ch. 3",
        "notes": [
            "atanh(r̂) is taken as normal with variance 1/(n − 3).",
            "For strong correlations Fisher z and Cohen's table part company: at r = 0.5 the "
            "formula gives 29.01 (30 rounded up) where Cohen (1988, Table 3.4.1) prints 28.",
        ],
    }


DESIGN = Design(
    name="correlation",
    formulas=FORMULAS["correlation"],
    tests=TESTS["correlation"],
    arms=arms,
    allocation=allocation,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
)
