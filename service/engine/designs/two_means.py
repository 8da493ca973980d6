"""Two independent means: Student and Welch t, non-inferiority and equivalence (TOST), exact power."""

from __future__ import annotations

import math

from scipy import integrate, stats

from ..errors import QuestionError
from ..quantiles import (
    effect_value,
    power_unreachable,
    root,
    solve_effect_or_raise,
    solve_n_or_raise,
    t_power,
)
from . import Solution
from .common import (
    analytic_method,
    check_formula,
    design_from,
    hypothesis,
    positive_effect,
    sides,
    two_arm_allocation,
    two_arms,
)

arms = two_arms
allocation = two_arm_allocation


def _formula(q: dict) -> str:
    """Return the formula name, refusing any this module does not offer."""
    return check_formula(q, "two_means")


def _sds(q: dict) -> tuple[float, float]:
    """Return (sd_control, sd_treatment), both checked positive."""
    return positive_effect(q, "sd_control"), positive_effect(q, "sd_treatment")


def _se_df(formula: str, s1: float, s2: float, n1: float, n2: float) -> tuple[float, float]:
    """Return the standard error of the difference and the t degrees of freedom."""
    v1, v2 = s1 * s1 / n1, s2 * s2 / n2
    se = math.sqrt(v1 + v2)
    if formula == "welch":
        df = (v1 + v2) ** 2 / (v1 * v1 / (n1 - 1.0) + v2 * v2 / (n2 - 1.0))
    else:
        df = n1 + n2 - 2.0
    return se, df


def tost_power(delta: float, se: float, margin: float, df: float, alpha: float) -> float:
    """Return the exact power of two one-sided t tests at ``alpha`` against bounds ±margin."""
    tc = float(stats.t.ppf(1.0 - alpha, df))
    # Conditional on the variance ratio v ~ chi2(df), both tests reject exactly when the observed
    # difference lies in (-margin + h, margin - h), h = tc·se·sqrt(v/df); integrate over v.
    v_max = df * (margin / (tc * se)) ** 2
    lo = float(stats.chi2.ppf(1e-15, df))
    hi = min(v_max, float(stats.chi2.isf(1e-15, df)))
    if hi <= lo:
        return 0.0

    def inside(v: float) -> float:
        h = tc * se * math.sqrt(v / df)
        p = stats.norm.cdf((margin - h - delta) / se) - stats.norm.cdf((-margin + h - delta) / se)
        return max(p, 0.0) * stats.chi2.pdf(v, df)

    mode = max(df - 2.0, lo)
    points = [mode] if lo < mode < hi else None
    value, _ = integrate.quad(inside, lo, hi, points=points, limit=200, epsabs=1e-12, epsrel=1e-10)
    return float(min(max(value, 0.0), 1.0))


def _power_at(q: dict, delta: float, n1: float, n2: float, alpha: float) -> float:
    """Return the power for true difference ``delta`` at n1 (control) and n2 (treatment)."""
    formula = _formula(q)
    s1, s2 = _sds(q)
    se, df = _se_df(formula, s1, s2, n1, n2)
    kind, margin, higher = hypothesis(q)
    if kind == "superiority":
        return t_power(abs(delta) / se, df, alpha, sides(q))
    if kind == "noninferiority":
        sign = 1.0 if higher else -1.0
        return t_power(sign * (delta - margin) / se, df, alpha, 1)
    return tost_power(delta, se, margin, df, alpha)


def _check_effect(q: dict, delta: float) -> None:
    """Refuse a difference that no sample size can turn into the target power."""
    kind, margin, higher = hypothesis(q)
    if kind == "superiority":
        if delta == 0:
            raise QuestionError(
                "effect.difference", "must differ from 0 for a superiority question; got 0"
            )
        return
    if margin is None:
        raise QuestionError("hypothesis.margin", f"is required for a {kind} question")
    if kind == "noninferiority":
        better = delta > margin if higher else delta < margin
        if not better:
            side = "above" if higher else "below"
            raise QuestionError(
                "effect.difference",
                f"{delta:g} must lie {side} the non-inferiority margin {margin:g}, "
                "or no sample size reaches the target power",
            )
    elif kind == "equivalence":
        if not abs(delta) < margin:
            raise QuestionError(
                "effect.difference",
                f"{delta:g} must lie strictly inside the equivalence bounds ±{margin:g}",
            )
    else:
        raise QuestionError("hypothesis.kind", f"'{kind}' is not offered for two_means")


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per arm reaching the target power (root of the exact power curve)."""
    delta = effect_value(q, "difference")
    _check_effect(q, delta)
    r = allocation(q)[1]
    target = float(q["target_power"])
    n1 = solve_n_or_raise(
        lambda n: _power_at(q, delta, n, r * n, alpha),
        target,
        max(1.5, 1.5 / r),
        field="effect.difference",
        value=delta,
    )
    return Solution(per_arm=[n1, r * n1])


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return the exact power at the given (possibly fractional) n per arm.

    A zero difference under superiority is answered: the power is then the size of the test.
    """
    delta = effect_value(q, "difference")
    if not (delta == 0 and hypothesis(q)[0] == "superiority"):
        _check_effect(q, delta)
    return _power_at(q, delta, float(per_arm[0]), float(per_arm[1]), alpha)


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return the smallest difference (largest, for equivalence) reaching the target power."""
    n1, n2 = float(per_arm[0]), float(per_arm[1])
    target = float(q["target_power"])
    kind, margin, higher = hypothesis(q)
    sign = 1.0 if higher else -1.0
    s1, s2 = _sds(q)
    scale = math.sqrt(s1 * s1 / n1 + s2 * s2 / n2)
    if kind == "superiority":
        x = solve_effect_or_raise(
            lambda d: _power_at(q, d, n1, n2, alpha), target, per_arm, hi=4 * scale
        )
        value = sign * x
    elif kind == "noninferiority":
        if margin is None:
            raise QuestionError("hypothesis.margin", "is required for a noninferiority question")
        x = solve_effect_or_raise(
            lambda d: _power_at(q, margin + sign * d, n1, n2, alpha), target, per_arm, hi=4 * scale
        )
        value = margin + sign * x
    else:
        if margin is None or not margin > 0:
            raise QuestionError(
                "hypothesis.margin", f"must be greater than 0 for equivalence; got {margin}"
            )
        # Power falls as the true difference moves from 0 to a bound: find where it crosses target.
        if _power_at(q, 0.0, n1, n2, alpha) < target:
            raise power_unreachable("sample_size.per_arm", target, per_arm)
        value = root(lambda d: _power_at(q, d, n1, n2, alpha) - target, 0.0, margin)
    return {"field": "difference", "value": float(value)}


def _unequal_sds(q: dict) -> bool:
    sds = q.get("effect") or {}
    return sds.get("sd_control") != sds.get("sd_treatment")


def warnings_for(q: dict, per_arm: list[float]) -> list[str]:
    """Warn when the pooled (Student) t test meets unequal SDs: its level is not kept there."""
    simulated = q.get("method") == "simulation"
    pooled = (
        (q.get("simulation") or {}).get("test") == "student_t"
        if simulated
        else q.get("formula") == "student"
    )
    if not pooled or not _unequal_sds(q):
        return []
    what = "test student_t" if simulated else "formula student"
    e = q["effect"]
    return [
        f"{what} assumes equal SDs but the SDs differ ({e['sd_control']:g} vs "
        f"{e['sd_treatment']:g}): the pooled t test does not hold its level there (its type I "
        "error grows well above alpha when the larger SD sits in the smaller arm); use Welch "
        "(formula welch, test welch_t)."
    ]


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    formula = _formula(q)
    kind, margin, higher = hypothesis(q)
    notes = []
    if formula == "welch":
        name = "noncentral t with Satterthwaite degrees of freedom (Welch)"
        ref = "Welch (1947), Biometrika 34:28; Satterthwaite (1946)"
    else:
        name = "noncentral t (Student, pooled variance)"
        ref = "Cohen (1988), ch. 2"
        if _unequal_sds(q):
            # Say what was computed: the pooled label would be wrong here.
            name = "noncentral t (formula student with unequal SDs: unpooled standard error, n1 + n2 − 2 df)"
            notes.append(
                "The SDs differ; the Student formula uses their unpooled standard error "
                "with n1 + n2 − 2 degrees of freedom. Welch is the safer choice."
            )
    if kind == "noninferiority":
        name = f"one-sided {name} against the margin"
        ref = f"Chow, Shao & Wang (2008), ch. 3; {ref}"
        notes.append(
            f"H0: the difference is {'at or below' if higher else 'at or above'} the "
            f"margin {margin:g}; noncentrality (difference − margin)/SE."
        )
    elif kind == "equivalence":
        name = f"two one-sided tests (TOST), exact power over the variance estimate; {name}"
        ref = f"Schuirmann (1987), J Pharmacokinet Biopharm 15:657; Owen (1965); {ref}"
        notes.append(
            f"Equivalence bounds ±{margin:g}; power integrates both tests jointly "
            "over the chi-square distribution of the variance estimate."
        )
        if formula == "welch":
            notes.append(
                "With unequal SDs the variance estimate is taken as chi-square with "
                "Satterthwaite degrees of freedom (an approximation)."
            )
    else:
        notes.append(
            "Power counts both rejection tails for a two-sided test; a one-sided test "
            "looks in the direction of the assumed difference."
        )
    notes.append("The n per arm is solved on the continuous power curve, then rounded up.")
    return analytic_method(name, ref, notes)


DESIGN = design_from("two_means", globals())
