"""A small extra cell registered by the engine tests only: event counts in a single group, tested
against a reference rate. It proves that one design module reaches ``compute`` without any
engine file naming it.

Analytic size (formula: Wald test of the log rate for Poisson counts over one unit of follow-up,
Var(log λ̂) ≈ 1/(n·λ₁) under the alternative, so n = (z_{1−α/2} + z_{1−β})² / (λ₁·ln²RR) with
λ₁ = RR·λ₀; common practice, no source). Stdlib only, as a design module may be.
"""

from __future__ import annotations

import math
from statistics import NormalDist

from service.engine import designs
from service.engine.designs.base import Analysis, Design, Field, Phrases, Solution
from service.engine.designs.common import (
    analytic_method,
    make_validate,
    no_warnings,
    number,
    one_group,
    one_group_allocation,
    tails,
)

FIELDS = (
    Field(
        "rate_ratio",
        "effect",
        "number",
        "Expected event rate divided by the reference rate.",
        "rate ratio",
        minimum=0.0,
        exclusive_minimum=True,
    ),
    Field(
        "reference_rate",
        "assumptions",
        "number",
        "Events per person over the follow-up under the null hypothesis.",
        "reference event rate",
        unit="events per person",
        minimum=0.0,
        exclusive_minimum=True,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = (("reference_rate",),)
ANALYSES = (
    Analysis("log_rate_z", "Wald test of the log rate", ("analytic",), ("superiority",), "toy"),
)
_Z = NormalDist()


def _log_ratio(q: dict, ratio: float | None = None) -> tuple[float, float]:
    """(ln RR, λ₁) at the question's ratio (or the one given)."""
    ratio = number(q, FIELDS, "rate_ratio") if ratio is None else ratio
    return math.log(ratio), ratio * number(q, FIELDS, "reference_rate")


def _power_at(q: dict, ratio: float, n: float, alpha: float) -> float:
    log_rr, rate = _log_ratio(q, ratio)
    shift = abs(log_rr) * math.sqrt(n * rate)
    z_a = _Z.inv_cdf(1 - alpha / tails(q))
    far = _Z.cdf(-shift - z_a) if tails(q) == 2 else 0.0
    return _Z.cdf(shift - z_a) + far


def solve_n(q: dict, alpha: float) -> Solution:
    log_rr, rate = _log_ratio(q)
    z = _Z.inv_cdf(1 - alpha / tails(q)) + _Z.inv_cdf(float(q["target_power"]))
    return Solution([z * z / (rate * log_rr * log_rr)])


def power(q: dict, per_group: list[float], alpha: float) -> float:
    return _power_at(q, number(q, FIELDS, "rate_ratio"), float(per_group[0]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """The rate ratio above 1 (below, when lower is better) reaching the target power."""
    target, n = float(q["target_power"]), float(per_group[0])
    higher = (q.get("hypothesis") or {}).get("higher_is_better", True)
    lo, hi = 0.0, 10.0  # bisection on ln RR
    for _ in range(200):
        mid = (lo + hi) / 2
        ratio = math.exp(mid if higher else -mid)
        lo, hi = (lo, mid) if _power_at(q, ratio, n, alpha) >= target else (mid, hi)
    return {"field": "rate_ratio", "value": math.exp(hi if higher else -hi)}


def _contrast(q: dict) -> float | None:
    ratio = (q.get("effect") or {}).get("rate_ratio")
    return math.log(ratio) if ratio else None


TOY = Design(
    outcome="toy_count",
    layout="single_group",
    label="Count outcome, single group",
    fields=FIELDS,
    forms=FORMS,
    solved="rate_ratio",
    analyses=ANALYSES,
    validate=make_validate(FIELDS, FORMS, "rate_ratio"),
    default_analysis=lambda q: "log_rate_z",
    groups=one_group,
    allocation=one_group_allocation,
    derive=lambda q: {},
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=lambda q: analytic_method(
        "log_rate_z", ANALYSES[0].label, "normal, Wald on the log scale", "toy", [], {}
    ),
    warnings_for=no_warnings,
    simulation=None,
    phrases=Phrases(
        effect=lambda q, record: f"a rate ratio of {q['effect'].get('rate_ratio')}",
        assumptions=lambda q: f"a reference rate of {q['assumptions'].get('reference_rate')}",
    ),
    example="",
    contrast=_contrast,
    null_effect=lambda q: 1.0,
)


def register() -> Design:
    """Register the toy cell (remove it with ``unregister``)."""
    return designs.register(TOY)


def unregister() -> None:
    """Remove the toy cell from the registry."""
    designs.unregister(TOY.outcome, TOY.layout)
