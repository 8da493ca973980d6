"""A small extra design registered by tests only: event counts in two groups, Wald test of the log
rate ratio. It proves that one design module reaches the schema, the catalogue, the JSON Schema
and the OpenAPI document without any other file naming it.

Analytic size (formula: Wald test of log(rate ratio) for Poisson counts over one unit of
follow-up, n per group = (z_{1-α/2} + z_{1-β})² (1/λ_c + 1/λ_t) / (ln RR)², common practice,
no source).
"""

from __future__ import annotations

import dataclasses
import math
from statistics import NormalDist

from service.engine import designs
from service.engine.designs.base import Analysis, Design, Field, Phrases, Solution
from service.engine.designs.common import (
    analytic_method,
    make_validate,
    two_group_allocation,
    two_groups,
    values,
)
from tests.engine import toy_design as engine_toy

FIELDS = (
    Field(
        "rate_ratio",
        "effect",
        "number",
        "Event rate in the treatment group divided by the control group's.",
        "rate ratio",
        minimum=0.0,
        exclusive_minimum=True,
    ),
    Field(
        "control_rate",
        "assumptions",
        "number",
        "Events per person in the control group over the follow-up.",
        "control event rate",
        unit="events per person",
        minimum=0.0,
        exclusive_minimum=True,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = (("control_rate",),)
ANALYSES = (
    Analysis(
        "wald_rate",
        "Wald test of the rate ratio",
        ("analytic",),
        ("superiority",),
        "a toy analysis for tests",
    ),
)
QUESTION = {
    "outcome": "toy_count",
    "layout": "two_groups",
    "effect": {"rate_ratio": 0.7},
    "assumptions": {"control_rate": 1.5},
}


def _z(p: float) -> float:
    return NormalDist().inv_cdf(p)


def _spread(q: dict) -> tuple[float, float]:
    v = values(q, FIELDS)
    rate, ratio = float(v["control_rate"]), float(v["rate_ratio"])
    return math.log(ratio), 1.0 / rate + 1.0 / (rate * ratio)


def solve_n(q: dict, alpha: float) -> Solution:
    log_rr, var = _spread(q)
    n = (_z(1 - alpha / 2) + _z(q["target_power"])) ** 2 * var / log_rr**2
    return Solution([n, n * float(q.get("allocation_ratio") or 1.0)])


def power(q: dict, per_group: list[float], alpha: float) -> float:
    log_rr, var = _spread(q)
    return NormalDist().cdf(abs(log_rr) / math.sqrt(var / per_group[0]) - _z(1 - alpha / 2))


def _contrast(q: dict) -> float | None:
    ratio = (q.get("effect") or {}).get("rate_ratio")
    return -math.log(ratio) if ratio else None


# The engine tests' single-group toy, changed where two groups differ: one toy skeleton.
TOY = dataclasses.replace(
    engine_toy.TOY,
    layout="two_groups",
    label="Count outcome, two groups",
    fields=FIELDS,
    forms=FORMS,
    analyses=ANALYSES,
    validate=make_validate(FIELDS, FORMS, "rate_ratio"),
    default_analysis=lambda q: "wald_rate",
    groups=two_groups,
    allocation=two_group_allocation,
    solve_n=solve_n,
    power=power,
    solve_effect=lambda q, per_group, alpha: {"field": "rate_ratio", "value": None},
    describe=lambda q: analytic_method(
        "wald_rate", "Wald test of the rate ratio", "normal, Wald", "toy", [], {}
    ),
    phrases=Phrases(
        effect=lambda q, record: f"a rate ratio of {q['effect'].get('rate_ratio')}",
        assumptions=lambda q: f"a control rate of {q['assumptions'].get('control_rate')}",
    ),
    contrast=_contrast,
)


def register() -> Design:
    """Register the toy design (remove it with ``unregister``)."""
    return designs.register(TOY)


def unregister() -> None:
    """Remove the toy design from the registry."""
    designs.unregister(TOY.outcome, TOY.layout)
