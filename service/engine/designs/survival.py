"""Log-rank test: events by Schoenfeld or Freedman, subjects from exponential P(event) with accrual."""

from __future__ import annotations

import math

from .. import direction
from ..errors import QuestionError
from ..quantiles import effect_value, normal_power, power_unreachable, root, z_alpha, z_sum
from . import Solution
from .common import (
    analytic_method,
    check_formula,
    check_superiority,
    design_from,
    positive_effect,
    sides,
    two_arm_allocation,
    two_arms,
)

_EPS = 1e-9

arms = two_arms
allocation = two_arm_allocation


def _setup(q: dict) -> dict:
    """Return the checked survival inputs (formula, hazards, accrual, follow-up, loss)."""
    formula = check_formula(q, "survival_logrank")
    check_superiority(q, "survival_logrank")
    lam = positive_effect(q, "hazard_control")
    eff = q.get("effect") or {}
    out = {"formula": formula, "hazard_control": lam}
    for name in ("accrual_period", "follow_up", "loss_rate"):
        value = float(eff.get(name) or 0.0)
        if value < 0:
            raise QuestionError(f"effect.{name}", f"must be 0 or more; got {value:g}")
        out[name] = value
    if out["accrual_period"] + out["follow_up"] <= 0:
        raise QuestionError(
            "effect.follow_up", "accrual_period + follow_up must be greater than 0; got 0"
        )
    return out


def _hr(q: dict) -> float:
    """Return the hazard ratio, checked positive and different from 1."""
    hr = effect_value(q, "hazard_ratio")
    if not hr > 0 or hr == 1:
        raise QuestionError("effect.hazard_ratio", f"must be greater than 0 and not 1; got {hr:g}")
    return hr


def p_event(hazard: float, accrual: float, follow_up: float, loss: float = 0.0) -> float:
    """Return P(event observed) under exponential event and loss hazards, uniform accrual."""
    theta = hazard + loss
    if accrual == 0:
        return hazard / theta * -math.expm1(-theta * follow_up)
    # e^(−θf) − e^(−θ(a+f)) written with expm1 to stay accurate when θ·a is small.
    not_seen = -math.exp(-theta * follow_up) * math.expm1(-theta * accrual) / (theta * accrual)
    return hazard / theta * (1.0 - not_seen)


def _events(formula: str, hr: float, r: float, z_total: float) -> float:
    """Return the events needed; r is the treatment:control allocation."""
    if formula == "freedman":
        return z_total**2 * (1.0 + r * hr) ** 2 / (r * (1.0 - hr) ** 2)
    p = 1.0 / (1.0 + r)
    return z_total**2 / (p * (1.0 - p) * math.log(hr) ** 2)


def _shift(formula: str, hr: float, r: float, events: float) -> float:
    """Return the standardized log-rank mean for the expected number of events."""
    if formula == "freedman":
        return math.sqrt(events * r) * abs(1.0 - hr) / (1.0 + r * hr)
    p = 1.0 / (1.0 + r)
    return math.sqrt(events * p * (1.0 - p)) * abs(math.log(hr))


def _p_events(s: dict, hr: float) -> tuple[float, float]:
    """Return P(event) in the control and treatment arms."""
    a, f, loss = s["accrual_period"], s["follow_up"], s["loss_rate"]
    lam = s["hazard_control"]
    return p_event(lam, a, f, loss), p_event(lam * hr, a, f, loss)


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded subjects per arm from the required events and P(event) per arm."""
    s = _setup(q)
    hr = _hr(q)
    r = allocation(q)[1]
    raw = _events(s["formula"], hr, r, z_sum(alpha, sides(q), float(q["target_power"])))
    required = int(math.ceil(raw - _EPS))
    pc, pt = _p_events(s, hr)
    mean = (pc + r * pt) / (1.0 + r)
    total = required / mean
    return Solution(
        per_arm=[total / (1.0 + r), total * r / (1.0 + r)],
        extra={
            "events": {"raw": raw, "required": required},
            "p_event": {"control": pc, "treatment": pt, "mean": mean},
            "subjects_total_raw": total,
        },
    )


def _power_at(q: dict, hr: float, per_arm: list[float], alpha: float) -> float:
    """Return the power from the expected events at the given n per arm."""
    s = _setup(q)
    n1, n2 = float(per_arm[0]), float(per_arm[1])
    pc, pt = _p_events(s, hr)
    events = n1 * pc + n2 * pt
    shift = _shift(s["formula"], hr, n2 / n1, events)
    return normal_power(shift, z_alpha(alpha, sides(q)), sides(q))


def power(q: dict, per_arm: list[float], alpha: float) -> float:
    """Return the power from the expected number of events at the given n per arm.

    A hazard ratio of 1 is answered: the power is then the size of the test.
    """
    hr = effect_value(q, "hazard_ratio")
    return _power_at(q, 1.0 if hr == 1 else _hr(q), per_arm, alpha)


def solve_effect(q: dict, per_arm: list[float], alpha: float) -> dict:
    """Return the hazard ratio nearest 1 reaching the target power at n.

    Below 1 (longer times), unless a one-sided test looks for shorter times (direction.py).
    """
    _setup(q)
    target = float(q["target_power"])
    lo, hi = 1e-6, 1.0 - 1e-12
    if sides(q) == 1 and direction.one_sided(q, "survival_logrank") < 0:
        lo, hi = 1e6, 1.0 + 1e-12
    if _power_at(q, lo, per_arm, alpha) < target:
        raise power_unreachable("sample_size.per_arm", target, per_arm)
    hr = root(lambda h: _power_at(q, h, per_arm, alpha) - target, lo, hi)
    return {"field": "hazard_ratio", "value": hr}


def warnings_for(q: dict, per_arm: list[float]) -> list[str]:
    """Return plain-language warnings about few expected events or a hazard ratio far from 1."""
    out = []
    hr = (q.get("effect") or {}).get("hazard_ratio")
    if hr is None:
        return out
    s = _setup(q)
    pc, pt = _p_events(s, float(hr))
    events = float(per_arm[0]) * pc + float(per_arm[1]) * pt
    if events < 30:
        out.append(
            f"Only {events:.1f} events are expected: the log-rank normal approximation "
            "is rough with so few; a simulation is safer."
        )
    if not 0.5 <= float(hr) <= 2.0:
        out.append(
            f"A hazard ratio of {float(hr):g} is far from 1, where the events formula is "
            "least accurate; a simulation is safer."
        )
    return out


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    s = _setup(q)
    if s["formula"] == "freedman":
        name = "log-rank events by Freedman, (z_a + z_b)²(1 + r·HR)² / (r(1 − HR)²)"
        ref = "Freedman (1982), Stat Med 1:121; Lachin & Foulkes (1986), Biometrics 42:507"
    else:
        name = "log-rank events by Schoenfeld, (z_a + z_b)² / (p(1 − p)·ln²HR)"
        ref = "Schoenfeld (1983), Biometrics 39:499; Lachin & Foulkes (1986), Biometrics 42:507"
    return analytic_method(
        name,
        ref,
        [
            "Subjects = required events ÷ the allocation-weighted mean P(event); P(event) assumes "
            "exponential survival, uniform accrual over the accrual period, further follow-up "
            "after it, and exponential loss to follow-up as a competing risk.",
            "r is the treatment:control allocation and p = 1/(1 + r) the control share.",
        ],
    )


DESIGN = design_from("survival_logrank", globals())
