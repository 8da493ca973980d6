"""Ordinal outcome, two groups: the Wilcoxon-Mann-Whitney rank-sum test, Noether's (1987) total
from P(Y > X) + ½P(Y = X). The continuous two-group cell reuses these functions."""

from __future__ import annotations

import math

from scipy import special

from .. import implied, models
from ..errors import QuestionError
from ..quantiles import normal_effect, normal_power, power_unreachable, z_alpha, z_sum
from .base import (
    Analysis,
    DecisionRule,
    Design,
    EffectAxis,
    Field,
    Phrases,
    SimulationModel,
    Solution,
)
from .common import (
    analysis_of,
    analytic_method,
    fmt,
    hypothesis,
    make_validate,
    no_warnings,
    number,
    stated_effect,
    tails,
    two_group_allocation,
    two_groups,
    values,
)

FIELDS = (
    Field(
        "prob_superiority",
        "effect",
        "number",
        "Probability that a treatment outcome beats a control outcome, ties counted half.",
        "probability of superiority",
        unit="proportion",
        minimum=0,
        maximum=1,
        exclusive_minimum=True,
        exclusive_maximum=True,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = ((),)
ANALYSES = (
    Analysis(
        "rank_sum",
        "Wilcoxon-Mann-Whitney rank-sum test",
        ("analytic", "simulation"),
        ("superiority",),
        "Noether 1987, JASA 82:645",
    ),
)

groups = two_groups
allocation = two_group_allocation
validate = make_validate(FIELDS, FORMS, "prob_superiority", ("prob_superiority",))


def _shift(p: float, n1: float, n2: float) -> float:
    """Return the standardized mean of the rank-sum statistic under the alternative."""
    total = n1 + n2
    c = n1 / total
    return math.sqrt(12.0 * c * (1.0 - c) * total) * abs(p - 0.5)


def power_at(p: float, n1: float, n2: float, alpha: float, tails: int) -> float:
    """Noether's normal-approximation power at P(Y > X) = p with n1 control, n2 treatment."""
    return normal_power(_shift(p, n1, n2), z_alpha(alpha, tails), tails)


def solve(
    p: float, weights: list[float], alpha: float, tails: int, target: float
) -> tuple[list[float], dict]:
    """Return (raw n per group, details) from N = (z_a + z_b)² / (12·c(1 − c)·(p − ½)²)."""
    c = weights[0] / sum(weights)
    z_total = z_sum(alpha, tails, target)
    total = z_total**2 / (12.0 * c * (1.0 - c) * (p - 0.5) ** 2)
    return [c * total, (1.0 - c) * total], {"total_raw": total}


def method_block(q: dict, analysis: str, label: str) -> dict:
    """The analytic method block of Noether's approximation."""
    return analytic_method(
        analysis,
        label,
        "Noether's normal approximation",
        "Noether (1987), JASA 82:645",
        [
            "The effect is P(Y > X) with Y from the treatment group; the total N is split by the "
            "allocation, c = n_control / N.",
            "Against the t test on normal data the rank-sum test keeps 3/π ≈ 95.5% efficiency "
            "(Hodges & Lehmann 1956).",
        ],
        {},
    )


def _p(q: dict) -> float:
    analysis_of(q, DESIGN, "analytic")
    return number(q, FIELDS, "prob_superiority")


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per group from Noether's total."""
    p = _p(q)
    if p == 0.5:
        raise QuestionError("effect.prob_superiority", "must differ from 0.5 (no effect); got 0.5")
    per_group, details = solve(p, allocation(q), alpha, tails(q), float(q["target_power"]))
    return Solution(per_group=per_group, details=details)


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return Noether's normal-approximation power at the given n per group."""
    return power_at(_p(q), float(per_group[0]), float(per_group[1]), alpha, tails(q))


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return P(Y > X) nearest ½ (above unless lower is better) reaching the target power."""
    analysis_of(q, DESIGN, "analytic")
    n1, n2 = float(per_group[0]), float(per_group[1])
    z_a = z_alpha(alpha, tails(q))
    target = float(q["target_power"])
    unit = _shift(1.0, n1, n2) / 0.5  # shift per unit of |p − ½|
    # |p − ½| cannot exceed ½; beyond that no effect reaches the target at this n.
    if normal_power(unit * 0.5, z_a, tails(q)) <= target:
        raise power_unreachable("sample_size.per_group", target, per_group)
    x = normal_effect(unit, z_a, tails(q), target, 0.5)
    higher = hypothesis(q)[2]
    return {"field": "prob_superiority", "value": 0.5 + x if higher else 0.5 - x}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    analysis = analysis_of(q, DESIGN, "analytic")
    return method_block(q, analysis, DESIGN.analysis(analysis).label)


def derive(q: dict) -> dict:
    """Nothing is derived: the probability of superiority is the effect itself."""
    return {}


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Unit normal groups whose means differ by √2·Φ⁻¹(p), so that P(Y > X) = p."""
    p = number(q, FIELDS, "prob_superiority")
    delta = math.sqrt(2.0) * float(special.ndtri(p))
    return [
        {"family": "normal", "mean": 0.0, "sd": 1.0},
        {"family": "normal", "mean": delta, "sd": 1.0},
    ]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    """Treatment drawn from the control distribution."""
    return [
        arms[0],
        dict(arms[0]),
    ], "treatment drawn from the control distribution (P(Y > X) = 1/2)"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """P(Y > X) moves away from ½ in the rule's direction, up to 0 or 1."""
    return EffectAxis(0.5, rule.direction, 0.5)


def approximate_n(plan, target: float) -> float | None:
    """Noether's first-group size with P(Y > X) from the data models themselves."""
    from ..approximate import noether_first

    return noether_first(plan, target)


def implied_fields(q: dict, arms: list[dict]) -> dict:
    """P(Y > X) + ½P(Y = X) between the posted groups, by quadrature."""
    return {"fields": {"prob_superiority": implied.prob_superiority(arms[0], arms[1])}}


def planned_moments(q: dict) -> tuple[float, float, float, float]:
    """(control mean, difference, sd_control, sd_treatment) of the planned data: the posted
    groups' moments, else unit normals shifted to give P(Y > X) (as ``default_data``)."""
    data = (q.get("simulation") or {}).get("data")
    if isinstance(data, dict) and {"control", "treatment"} <= set(data):
        found = []
        for name in ("control", "treatment"):
            mean, var = models.moments(models.check_arm(data[name], f"simulation.data.{name}"))
            if mean is None or var is None or not math.isfinite(var):
                raise QuestionError(
                    f"simulation.data.{name}",
                    "the robustness panel matches each departure to the group's mean and SD; "
                    f"the {data[name].get('family')!r} group has none",
                )
            found.append((mean, math.sqrt(var)))
        (m0, s0), (m1, s1) = found
        return m0, m1 - m0, s0, s1
    p = values(q, FIELDS).get("prob_superiority")
    if isinstance(p, bool) or not isinstance(p, (int, float)) or not 0 < p < 1:
        raise QuestionError(
            "effect.prob_superiority", f"must be a number in (0, 1) for the panel; got {p!r}"
        )
    return 0.0, default_data(q)[1]["mean"], 1.0, 1.0


SIMULATION = SimulationModel(
    data_keys=("control", "treatment"),
    default_data=default_data,
    null_data=null_data,
    kernels={"rank_sum": "rank_sum"},
    effect_axis=effect_axis,
    implied_contrast=lambda arms: models.center(arms[1]) - models.center(arms[0]),
    implied_fields=implied_fields,
    approximate_n=approximate_n,
    planned_moments=planned_moments,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "prob_superiority")
    if value is None:
        return "the probability that a treatment outcome beats a control outcome"
    return (
        f"a probability of {fmt(value)} that a treatment outcome beats a control outcome "
        "(ties counted half)"
    )


DESIGN = Design(
    outcome="ordinal",
    layout="two_groups",
    label="Ordinal outcome, two groups",
    fields=FIELDS,
    forms=FORMS,
    solved="prob_superiority",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "rank_sum",
    groups=groups,
    allocation=allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=lambda q: ""),
    example="northbridge_pain_score_ranks.json",
    contrast=lambda q: (
        None
        if values(q, FIELDS).get("prob_superiority") is None
        else values(q, FIELDS)["prob_superiority"] - 0.5
    ),
    null_effect=lambda q: 0.5,
)
