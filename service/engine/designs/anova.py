"""One-way ANOVA with k equal groups: noncentral F with λ = f²·N."""

from __future__ import annotations

import math

from scipy import stats

from ..errors import QuestionError
from ..quantiles import effect_value, solve_effect_or_raise, solve_n_or_raise
from . import Solution
from .common import analytic_method, check_formula, check_superiority, design_from, positive_effect


def _groups(q: dict) -> int:
    """Return the number of groups, checked to be an integer of at least 2."""
    k = effect_value(q, "groups")
    if k != int(k) or k < 2:
        raise QuestionError("effect.groups", f"must be a whole number of at least 2; got {k:g}")
    return int(k)


def _check(q: dict) -> None:
    """Refuse formulas and hypotheses this design does not offer."""
    check_formula(q, "anova_oneway")
    check_superiority(q, "anova_oneway")


def f_power(f: float, per_arm: list[float], alpha: float) -> float:
    """Return the power of the one-way F test for Cohen's f with the given group sizes."""
    k = len(per_arm)
    total = float(sum(per_arm))
    df1, df2 = k - 1.0, total - k
    crit = stats.f.isf(alpha, df1, df2)
    return float(min(max(stats.ncf.sf(crit, df1, df2, f * f * total), 0.0), 1.0))


def arms(q: dict) -> int:
    """Return the number of groups."""
    return _groups(q)


def allocation(q: dict) -> list[float]:
    """Return equal relative group sizes."""
    return [1.0] * _groups(q)


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per group reaching the target power (root of the exact F curve)."""
    _check(q)
    k = _groups(q)
    f = positive_effect(q, "cohens_f")
    # Start at 2 per group: the noncentral F is unreliable at error df near 0.
    n = solve_n_or_raise(
        lambda n: f_power(f, [n] * k, alpha),
        float(q["target_power"]),
        2.0,
        field="effect.cohens_f",
        value=f,
    )
    return Solution(per_arm=[n] * k)


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return the exact power at the given (possibly fractional) n per group."""
    _check(q)
    if len(per_arm) != _groups(q):
        raise QuestionError(
            "sample_size.per_arm", f"needs one entry per group ({_groups(q)}); got {len(per_arm)}"
        )
    return f_power(effect_value(q, "cohens_f"), [float(n) for n in per_arm], alpha)


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return the smallest Cohen's f reaching the target power at the given n per group."""
    _check(q)
    sizes = [float(n) for n in per_arm]
    f = solve_effect_or_raise(
        lambda x: f_power(x, sizes, alpha),
        float(q["target_power"]),
        per_arm,
        hi=4.0 / math.sqrt(sum(sizes)),
    )
    return {"field": "cohens_f", "value": f}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    return analytic_method(
        "noncentral F (one-way ANOVA), λ = f²·N",
        "Cohen (1988), ch. 8",
        [
            "df = (k − 1, N − k) with N the total over k equal groups; f is the SD of the group "
            "means (divisor k) over the common within-group SD.",
            "The F test is two-sided by nature; the sides setting does not apply.",
        ],
    )


DESIGN = design_from("anova_oneway", globals())
