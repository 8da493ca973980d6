"""Two independent proportions: pooled and unpooled z, Fleiss continuity correction, arcsine (h),
and the Farrington-Manning score test for non-inferiority and equivalence."""

from __future__ import annotations

import math

from scipy import stats

from ..errors import QuestionError
from ..quantiles import normal_power, power_unreachable, root, z, z_alpha
from . import FORMULAS as _ALL_FORMULAS
from . import Solution
from .common import (
    analytic_method,
    check_formula,
    design_from,
    effect_between,
    hypothesis,
    sides,
    two_arm_allocation,
    two_arms,
)

FORMULAS = tuple(_ALL_FORMULAS["two_proportions"])
# Which formulas answer which hypothesis. The score test with a margin of 0 is the pooled z test,
# so farrington_manning is offered only against a margin; pooled_z and arcsine only for
# superiority. The default for non-inferiority and equivalence is farrington_manning.
APPLIES = {
    "superiority": ("pooled_z", "unpooled_z", "arcsine"),
    "noninferiority": ("farrington_manning", "unpooled_z"),
    "equivalence": ("farrington_manning", "unpooled_z"),
}
_EDGE = 1e-9

arms = two_arms
allocation = two_arm_allocation


def _prob(q: dict, name: str) -> float:
    """Return a proportion from the effect, checked to lie strictly between 0 and 1."""
    return effect_between(q, name, 0.0, 1.0)


def _setup(q: dict) -> tuple[str, str, float | None, bool, bool]:
    """Return (formula, kind, margin, higher_is_better, continuity) after checking they combine."""
    formula = check_formula(q, "two_proportions", FORMULAS)
    kind, margin, higher = hypothesis(q)
    cc = bool((q.get("effect") or {}).get("continuity_correction", False))
    if kind not in ("superiority", "noninferiority", "equivalence"):
        raise QuestionError("hypothesis.kind", f"'{kind}' is not offered for two_proportions")
    if kind != "superiority" and margin is None:
        raise QuestionError("hypothesis.margin", f"is required for a {kind} question")
    if formula not in APPLIES[kind]:
        raise QuestionError(
            "formula",
            f"'{formula}' does not apply to a {kind} question of two proportions; "
            f"use one of {list(APPLIES[kind])} (default {APPLIES[kind][0]})",
        )
    if cc and (formula != "pooled_z" or kind != "superiority"):
        raise QuestionError(
            "effect.continuity_correction",
            "the continuity correction is offered only with formula 'pooled_z' for superiority",
        )
    return formula, kind, margin, higher, cc


def _var1(p1: float, p2: float, n1: float, n2: float) -> float:
    """Return the unpooled variance of p̂2 − p̂1."""
    return p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2


def restricted_mle(p1: float, p2: float, r: float, margin: float) -> tuple[float, float]:
    """Return (p̃1, p̃2), the MLE of (control, treatment) under p̃2 − p̃1 = margin.

    Closed-form root of the likelihood cubic (Miettinen & Nurminen 1985; Farrington & Manning
    1990), evaluated at the expected proportions p1, p2 with n2 = r·n1.
    """
    if margin == 0:
        pooled = (p1 + r * p2) / (1 + r)
        return pooled, pooled
    # Parameterised on the treatment arm (a, weight r) against the control arm (b, weight 1).
    theta = 1.0 / r  # n_control / n_treatment
    a = 1.0 + theta
    b = -(1.0 + theta + p2 + theta * p1 + margin * (theta + 2.0))
    c = margin * margin + margin * (2.0 * p2 + theta + 1.0) + p2 + theta * p1
    d = -p2 * margin * (1.0 + margin)
    v = b**3 / (3.0 * a) ** 3 - b * c / (6.0 * a * a) + d / (2.0 * a)
    u = math.copysign(math.sqrt(max(b * b / (3.0 * a) ** 2 - c / (3.0 * a), 0.0)), v)
    w = (math.pi + math.acos(max(-1.0, min(1.0, v / u**3 if u else 0.0)))) / 3.0
    pt = 2.0 * u * math.cos(w) - b / (3.0 * a)
    pc = pt - margin
    return min(max(pc, 0.0), 1.0), min(max(pt, 0.0), 1.0)


def _fm_power(p1: float, p2: float, n1: float, n2: float, bound: float, upper: bool, z_a: float):
    """Power of one Farrington-Manning score test of H0: p2 − p1 = bound.

    ``upper`` true rejects for a difference above the bound. The statistic's null SD comes from
    the restricted MLE, its SD under the truth from p1 and p2.
    """
    q1, q2 = restricted_mle(p1, p2, n2 / n1, bound)
    sd0 = math.sqrt(q1 * (1 - q1) / n1 + q2 * (1 - q2) / n2)
    sd1 = math.sqrt(_var1(p1, p2, n1, n2))
    gap = (p2 - p1 - bound) if upper else (bound - (p2 - p1))
    return float(stats.norm.cdf((gap - z_a * sd0) / sd1))


def _power_at(q: dict, p1: float, p2: float, n1: float, n2: float, alpha: float) -> float:
    """Return the power for true proportions p1 (control) and p2 (treatment) at n1 and n2."""
    formula, kind, margin, higher, cc = _setup(q)
    tails = sides(q)
    if kind == "superiority":
        z_a = z_alpha(alpha, tails)
        if formula == "arcsine":
            h = 2 * math.asin(math.sqrt(p2)) - 2 * math.asin(math.sqrt(p1))
            return normal_power(h / math.sqrt(1 / n1 + 1 / n2), z_a, tails)
        diff = abs(p2 - p1)
        sd1 = math.sqrt(_var1(p1, p2, n1, n2))
        if formula == "unpooled_z":
            return normal_power(diff / sd1, z_a, tails)
        pbar = (n1 * p1 + n2 * p2) / (n1 + n2)
        sd0 = math.sqrt(pbar * (1 - pbar) * (1 / n1 + 1 / n2))
        # Fleiss' correction shrinks the observed difference by (1/n1 + 1/n2)/2.
        k = (1 / n1 + 1 / n2) / 2 if cc else 0.0
        power = stats.norm.cdf((diff - k - z_a * sd0) / sd1)
        if tails == 2:
            power += stats.norm.cdf((-diff - k - z_a * sd0) / sd1)
        return float(min(power, 1.0))
    z_a = z(1 - alpha)
    if formula == "farrington_manning":
        if kind == "noninferiority":
            return _fm_power(p1, p2, n1, n2, margin, higher, z_a)
        both = (
            _fm_power(p1, p2, n1, n2, -margin, True, z_a)
            + _fm_power(p1, p2, n1, n2, margin, False, z_a)
            - 1
        )
        return float(max(both, 0.0))
    sd1 = math.sqrt(_var1(p1, p2, n1, n2))
    diff = p2 - p1
    if kind == "noninferiority":
        sign = 1.0 if higher else -1.0
        return float(stats.norm.cdf(sign * (diff - margin) / sd1 - z_a))
    power = (
        stats.norm.cdf((margin - diff) / sd1 - z_a)
        + stats.norm.cdf((margin + diff) / sd1 - z_a)
        - 1
    )
    return float(max(power, 0.0))


def _check_effect(q: dict, p1: float, p2: float) -> None:
    """Refuse proportions that no sample size can turn into the target power."""
    _, kind, margin, higher, _ = _setup(q)
    diff = p2 - p1
    if kind == "superiority" and diff == 0:
        raise QuestionError(
            "effect.p_treatment", f"must differ from p_control ({p1:g}) for a superiority question"
        )
    if kind == "noninferiority" and not (diff > margin if higher else diff < margin):
        side = "above" if higher else "below"
        raise QuestionError(
            "effect.p_treatment",
            f"{p2:g} gives a difference {diff:g} that must lie {side} the margin {margin:g}",
        )
    if kind == "equivalence" and not abs(diff) < margin:
        raise QuestionError(
            "effect.p_treatment",
            f"{p2:g} gives a difference {diff:g} outside the equivalence bounds ±{margin:g}",
        )


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per arm from the closed-form formula (root finding for equivalence)."""
    formula, kind, margin, higher, cc = _setup(q)
    p1, p2 = _prob(q, "p_control"), _prob(q, "p_treatment")
    _check_effect(q, p1, p2)
    r = allocation(q)[1]
    tails = sides(q)
    z_b = z(float(q["target_power"]))
    extra: dict = {}
    if kind == "superiority":
        z_a = z_alpha(alpha, tails)
        if formula == "arcsine":
            h = 2 * math.asin(math.sqrt(p2)) - 2 * math.asin(math.sqrt(p1))
            n1 = (1 + 1 / r) * ((z_a + z_b) / h) ** 2
            extra["cohens_h"] = h
        elif formula == "unpooled_z":
            n1 = (z_a + z_b) ** 2 * (p1 * (1 - p1) + p2 * (1 - p2) / r) / (p2 - p1) ** 2
        else:
            pbar = (p1 + r * p2) / (1 + r)
            a = z_a * math.sqrt(pbar * (1 - pbar) * (1 + 1 / r))
            b = z_b * math.sqrt(p1 * (1 - p1) + p2 * (1 - p2) / r)
            n1 = ((a + b) / (p2 - p1)) ** 2
            if cc:
                extra["uncorrected_per_arm"] = [n1, r * n1]
                c = 2 * (r + 1) / (r * n1 * abs(p2 - p1))
                n1 = n1 / 4 * (1 + math.sqrt(1 + c)) ** 2
    elif kind == "noninferiority" and formula == "farrington_manning":
        # Farrington & Manning (1990): n1 = [z_a·√V0 + z_b·√V1]² / (p2 − p1 − margin)², V0 from
        # the restricted MLE under the margin, V1 from the assumed proportions (per control unit).
        z_a = z(1 - alpha)
        q1, q2 = restricted_mle(p1, p2, r, margin)
        v0 = q1 * (1 - q1) + q2 * (1 - q2) / r
        v1 = p1 * (1 - p1) + p2 * (1 - p2) / r
        n1 = (z_a * math.sqrt(v0) + z_b * math.sqrt(v1)) ** 2 / (p2 - p1 - margin) ** 2
        extra["restricted_mle"] = {"p_control": q1, "p_treatment": q2}
    elif kind == "noninferiority":
        z_a = z(1 - alpha)
        n1 = (z_a + z_b) ** 2 * (p1 * (1 - p1) + p2 * (1 - p2) / r) / (p2 - p1 - margin) ** 2
    else:
        # Both one-sided tests must reject; no closed form away from p2 = p1, so solve the curve.
        target = float(q["target_power"])
        f = lambda n: _power_at(q, p1, p2, n, r * n, alpha) - target  # noqa: E731
        hi = 16.0
        while f(hi) < 0:
            hi *= 4
            if hi > 1e12:
                raise QuestionError(
                    "effect.p_treatment", "the difference is too close to the bounds to plan for"
                )
        n1 = root(f, 1e-6, hi)
    return Solution(per_arm=[n1, r * n1], extra=extra)


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return the normal-approximation power at the given (possibly fractional) n per arm."""
    p1, p2 = _prob(q, "p_control"), _prob(q, "p_treatment")
    _setup(q)
    return _power_at(q, p1, p2, float(per_arm[0]), float(per_arm[1]), alpha)


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return the treatment proportion nearest p_control (in the better direction) reaching target power."""
    _, kind, margin, higher, _ = _setup(q)
    p1 = _prob(q, "p_control")
    n1, n2 = float(per_arm[0]), float(per_arm[1])
    target = float(q["target_power"])
    sign = 1.0 if higher else -1.0
    end = 1.0 - _EDGE if higher else _EDGE

    def f(p2: float) -> float:
        return _power_at(q, p1, p2, n1, n2, alpha) - target

    if kind == "equivalence":
        start = p1
        end = min(max(p1 + sign * margin, _EDGE), 1.0 - _EDGE)
        if f(start) < 0:
            raise power_unreachable("sample_size.per_arm", target, per_arm)
        if f(end) >= 0:
            return {"field": "p_treatment", "value": float(end)}
        return {"field": "p_treatment", "value": root(f, start, end)}
    start = p1 if kind == "superiority" else p1 + margin
    start = min(max(start, _EDGE), 1.0 - _EDGE)
    if f(start) >= 0:
        return {"field": "p_treatment", "value": float(start)}
    if f(end) < 0:
        raise power_unreachable("sample_size.per_arm", target, per_arm)
    return {"field": "p_treatment", "value": root(f, start, end)}


def warnings_for(q: dict, per_arm: list[float]) -> list[str]:
    """Return plain-language warnings when the normal approximation is strained (n·p < 5)."""
    out = []
    eff = q.get("effect") or {}
    for arm, name, n in zip(
        ("control", "treatment"), ("p_control", "p_treatment"), per_arm, strict=False
    ):
        p = eff.get(name)
        if p is None:
            continue
        expected = min(float(n) * p, float(n) * (1 - p))
        if expected < 5:
            out.append(
                f"The expected count in the {arm} arm is {expected:.1f} (below 5): the normal "
                "approximation is rough here; a simulated Fisher exact test is safer."
            )
    return out


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    formula, kind, margin, higher, cc = _setup(q)
    if kind != "superiority":
        what = (
            "non-inferiority" if kind == "noninferiority" else "equivalence (two one-sided tests)"
        )
        notes = [
            f"One-sided tests at alpha against the margin {margin:g} on the difference "
            "p_treatment − p_control."
        ]
        if formula == "farrington_manning":
            notes.append(
                "Score test: the variance under H0 uses the maximum-likelihood proportions "
                "restricted to a difference equal to the margin; under the alternative, the "
                "assumed proportions."
            )
            return analytic_method(
                f"Farrington-Manning score test (restricted-MLE variance), {what}",
                "Farrington & Manning (1990), Stat Med 9:1447; Miettinen & Nurminen (1985)",
                notes,
            )
        notes.append("Wald test: the variance under both hypotheses is the unpooled one.")
        return analytic_method(
            f"normal approximation (Wald), unpooled variance, {what}",
            "Chow, Shao & Wang (2008), ch. 4",
            notes,
        )
    if formula == "arcsine":
        return analytic_method(
            "arcsine transformation (Cohen's h)",
            "Cohen (1988), ch. 6",
            ["h = 2·asin√p_treatment − 2·asin√p_control; Var(2·asin√p̂) ≈ 1/n."],
        )
    if formula == "unpooled_z":
        return analytic_method(
            "normal approximation, unpooled variance",
            "Chow, Shao & Wang (2008), ch. 4",
            ["The variance under both hypotheses is p1(1 − p1)/n1 + p2(1 − p2)/n2."],
        )
    notes = ["Pooled variance under H0, unpooled under the alternative."]
    if cc:
        notes.append(
            "Fleiss continuity correction: n = n′/4·(1 + √(1 + 2(r + 1)/(r·n′·|Δ|)))², "
            "which is n′/4·(1 + √(1 + 4/(n′·|Δ|)))² for equal arms."
        )
    return analytic_method(
        "normal approximation, pooled variance" + (", continuity corrected" if cc else ""),
        "Fleiss, Levin & Paik (2003), ch. 4",
        notes,
    )


DESIGN = design_from("two_proportions", globals(), formulas=FORMULAS)
