"""One-way ANOVA: noncentral F with λ = Σnᵢ(μᵢ − μ̄_w)²/σ² from the actual group sizes.

With equal groups this is λ = f²·N. With unequal sizes, group means give λ directly (μ̄_w the
size-weighted mean); Cohen's f alone is read with the size-weighted definition (Cohen 1988,
§8.2), so λ = f²·N again. The sample-size search keeps equal groups.
"""

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


def lambda_power(lam: float, per_arm: list[float], alpha: float) -> float:
    """Return the power of the one-way F test with noncentrality ``lam`` at the group sizes."""
    if lam <= 0.0:
        # Central F: the rejection rate is alpha exactly (scipy's ncf.sf misbehaves at nc = 0).
        return float(alpha)
    k = len(per_arm)
    total = float(sum(per_arm))
    df1, df2 = k - 1.0, total - k
    crit = stats.f.isf(alpha, df1, df2)
    return float(min(max(stats.ncf.sf(crit, df1, df2, lam), 0.0), 1.0))


def f_power(f: float, per_arm: list[float], alpha: float) -> float:
    """Return the power for Cohen's f (size-weighted definition): λ = f²·N."""
    return lambda_power(f * f * float(sum(per_arm)), per_arm, alpha)


def means_lambda(means: list[float], sd: float, per_arm: list[float]) -> float:
    """Return λ = Σnᵢ(μᵢ − μ̄_w)²/σ² with μ̄_w the size-weighted grand mean."""
    total = math.fsum(per_arm)
    grand = math.fsum(n * m for n, m in zip(per_arm, means, strict=True)) / total
    return math.fsum(n * (m - grand) ** 2 for n, m in zip(per_arm, means, strict=True)) / sd**2


def _means(q: dict) -> tuple[list[float], float] | None:
    """Return (group means, sd) when the question gives them, else None."""
    e = q.get("effect") or {}
    if e.get("group_means") is None or e.get("sd") is None:
        return None
    return [float(m) for m in e["group_means"]], float(e["sd"])


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
    sizes = [float(n) for n in per_arm]
    given = _means(q)
    if given is not None and len(set(sizes)) > 1:
        # Equal groups keep λ = f²·N (the same number, digit for digit, as before).
        return lambda_power(means_lambda(*given, sizes), sizes, alpha)
    return f_power(effect_value(q, "cohens_f"), sizes, alpha)


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
            "df = (k − 1, N − k) with N the total over k groups; λ = Σnᵢ(μᵢ − μ̄_w)²/σ² from "
            "the actual group sizes, μ̄_w the size-weighted grand mean.",
            "Cohen's f is the SD of the group means around their size-weighted mean, each group "
            "weighted by its share of N (Cohen 1988, §8.2), over the common within-group SD; "
            "with equal groups this is the plain SD of the means (divisor k). Group means given "
            "with sd are used directly.",
            "The sample-size search assumes equal groups.",
            "The F test is two-sided by nature; the sides setting does not apply.",
        ],
    )


DESIGN = design_from("anova_oneway", globals())
