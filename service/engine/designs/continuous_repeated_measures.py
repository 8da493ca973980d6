"""Continuous outcome, two groups measured at v equally spaced visits: the difference in the mean
over visits or in the slope over time (Diggle, Heagerty, Liang & Zeger 2002, §2.4), under
compound symmetry or AR(1), with monotone dropout over visits (a per-visit retention).

The analysis is generalized least squares with the covariance taken as known (engine/repeated.py)
and a z test, as Diggle et al.'s formulas assume; with dropout each subject contributes the
information of the visits it was seen at, and the formula uses the expected information.
"""

from __future__ import annotations

import math

from .. import models, repeated
from ..errors import QuestionError
from ..quantiles import normal_power, solve_effect_or_raise, solve_n_or_raise, z_alpha
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
    checked_analysis,
    fmt,
    make_validate,
    number,
    stated_effect,
    tails,
    two_group_allocation,
    two_groups,
    values,
)

FIELDS = (
    Field(
        "difference",
        "effect",
        "number",
        "Expected difference, treatment minus control, in the mean over visits (mean_over_visits) "
        "or in the change per visit interval (slope).",
        "difference between the groups",
        unit="outcome units",
    ),
    Field(
        "sd",
        "assumptions",
        "number",
        "Standard deviation of the outcome at one visit (the same at every visit).",
        "standard deviation at one visit",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "correlation",
        "assumptions",
        "number",
        "Correlation of two measurements of one subject (compound symmetry) or of two adjacent "
        "visits (AR(1)).",
        "within-subject correlation",
        minimum=0,
        maximum=1,
        exclusive_maximum=True,
    ),
    Field(
        "visit_count",
        "assumptions",
        "integer",
        "Number of equally spaced visits, the first at time 0.",
        "number of visits",
        minimum=2,
        maximum=50,
    ),
    Field(
        "correlation_structure",
        "assumptions",
        "choice",
        "How measurements of one subject correlate: equally at every lag (compound_symmetry) or "
        "decaying with the lag as ρ^lag (ar1).",
        "correlation structure",
        choices=repeated.STRUCTURES,
        default="compound_symmetry",
    ),
    Field(
        "retention",
        "assumptions",
        "number",
        "Probability that a subject seen at one visit is seen at the next (1: no dropout over "
        "visits).",
        "retention from one visit to the next",
        unit="proportion",
        minimum=0,
        maximum=1,
        exclusive_minimum=True,
        default=1.0,
    ),
)
FORMS = (("sd", "correlation", "visit_count"),)
ANALYSES = (
    Analysis(
        "mean_over_visits",
        "comparison of the mean over visits (GLS)",
        ("analytic", "simulation"),
        ("superiority",),
        "Diggle, Heagerty, Liang & Zeger 2002, §2.4; GLS with known covariance",
    ),
    Analysis(
        "slope",
        "comparison of slopes over time (GLS)",
        ("analytic", "simulation"),
        ("superiority",),
        "Diggle, Heagerty, Liang & Zeger 2002, §2.4; GLS with known covariance",
    ),
)
STRUCTURE_WORDS = {"compound_symmetry": "compound symmetry", "ar1": "AR(1)"}


def _setting(q: dict) -> dict:
    v = values(q, FIELDS)
    return {
        "visits": int(number(q, FIELDS, "visit_count")),
        "rho": number(q, FIELDS, "correlation"),
        "structure": v.get("correlation_structure") or "compound_symmetry",
        "retention": number(q, FIELDS, "retention"),
        "sd": number(q, FIELDS, "sd"),
    }


def unit_variance(q: dict, analysis: str) -> float:
    s = _setting(q)
    try:
        return repeated.unit_variance(
            s["structure"], s["rho"], s["visits"], analysis, s["retention"]
        )
    except ValueError as exc:
        raise QuestionError("assumptions.retention", str(exc)) from None


def derive(q: dict) -> dict:
    """The variance factor of one subject's contribution (× σ², per group: ÷ n)."""
    try:
        analysis = analysis_of(q, DESIGN, "analytic")
        out = {"variance_factor": unit_variance(q, analysis)}
        s = _setting(q)
        out["completers"] = s["retention"] ** (s["visits"] - 1)
        return out
    except QuestionError:
        return {}


validate = make_validate(FIELDS, FORMS, "difference")


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def _power_at(q: dict, difference: float, per_group: list[float], alpha: float) -> float:
    analysis = _check(q)
    u, sd = unit_variance(q, analysis), number(q, FIELDS, "sd")
    se = sd * math.sqrt(u / float(per_group[0]) + u / float(per_group[1]))
    return normal_power(difference / se, z_alpha(alpha, tails(q)), tails(q))


def power(q: dict, per_group: list[float], alpha: float) -> float:
    return _power_at(q, number(q, FIELDS, "difference"), per_group, alpha)


def solve_n(q: dict, alpha: float) -> Solution:
    _check(q)
    d = number(q, FIELDS, "difference")
    ratio = float(q.get("allocation_ratio") or 1.0)
    n = solve_n_or_raise(
        lambda n: _power_at(q, d, [n, ratio * n], alpha),
        float(q["target_power"]),
        2.0,
        field="effect.difference",
        value=d,
    )
    return Solution(per_group=[n, ratio * n])


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    _check(q)
    sd = number(q, FIELDS, "sd")
    x = solve_effect_or_raise(
        lambda x: _power_at(q, x, per_group, alpha),
        float(q["target_power"]),
        per_group,
        hi=50.0 * sd,
    )
    higher = (q.get("hypothesis") or {}).get("higher_is_better", True)
    return {"field": "difference", "value": x if higher else -x}


def describe(q: dict) -> dict:
    analysis = _check(q)
    s = _setting(q)
    what = "the mean over visits" if analysis == "mean_over_visits" else "the slope over time"
    return analytic_method(
        analysis,
        DESIGN.analysis(analysis).label,
        "normal, GLS variance with known covariance",
        "Diggle, Heagerty, Liang & Zeger (2002), §2.4",
        [
            f"{s['visits']} visits at times 0 to {s['visits'] - 1}; {what} of each group by "
            f"generalized least squares with {STRUCTURE_WORDS[s['structure']]} correlation "
            f"{s['rho']:g} and the SD taken as known; a z test of the difference.",
            "With complete data and compound symmetry the variance of a group's mean over visits "
            "is σ²(1 + (v − 1)ρ)/(v·n) and of its slope σ²(1 − ρ)/(n·Σ(tⱼ − t̄)²).",
            "Dropout over visits is monotone: a subject seen at one visit is seen at the next "
            f"with probability {s['retention']:g}; each contributes the information of the "
            "visits it attended, and the formula uses the expected information.",
        ],
        derive(q),
    )


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    return []


# --- simulation ------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Per group: ``mean`` is the group's level (mean over visits) or its slope."""
    d, sd = number(q, FIELDS, "difference"), number(q, FIELDS, "sd")
    return [
        {"family": "normal", "mean": 0.0, "sd": sd},
        {"family": "normal", "mean": d, "sd": sd},
    ]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    c0 = models.center(arms[0])
    return [arms[0], models.shifted(arms[1], c0 - models.center(arms[1]))], (
        "treatment given the control's mean over visits or slope (difference 0)"
    )


def data_block(arms: list[dict], labels: list[str], settings: dict) -> dict:
    return {
        "visits": settings["visits"],
        "correlation": settings["rho"],
        "correlation_structure": settings["structure"],
        "retention": settings["retention"],
        "sd": settings["sd"],
        "control": models.public(arms[0]),
        "treatment": models.public(arms[1]),
    }


def approximate_n(plan, target: float) -> float | None:
    s = plan.settings
    d = models.center(plan.models[1]) - models.center(plan.models[0])
    if d == 0:
        return None
    u = repeated.unit_variance(s["structure"], s["rho"], s["visits"], plan.analysis, s["retention"])
    za = z_alpha(plan.alpha, plan.rule.tails)
    from ..quantiles import z

    return 2.0 * u * (s["sd"] * (za + z(target)) / d) ** 2


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"mean_over_visits": "repeated_gls", "slope": "repeated_gls"},
    effect_axis=lambda q, rule: EffectAxis(0.0, rule.direction, math.inf),
    settings=_setting,
    data_block=data_block,
    implied_contrast=lambda arms: models.center(arms[1]) - models.center(arms[0]),
    approximate_n=approximate_n,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "difference")
    what = (
        "the change per visit interval"
        if (q.get("analysis") or "mean_over_visits") == "slope"
        else "the mean over visits"
    )
    if value is None:
        return f"the difference in {what}, treatment minus control"
    return f"a difference of {fmt(value)} in {what} (treatment minus control)"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if any(v.get(k) is None for k in ("sd", "correlation", "visit_count")):
        return ""
    structure = STRUCTURE_WORDS[v.get("correlation_structure") or "compound_symmetry"]
    text = (
        f"{v['visit_count']} visits, a standard deviation of {fmt(v['sd'])} at each visit and "
        f"a within-subject correlation of {fmt(v['correlation'])} ({structure})"
    )
    if float(v.get("retention", 1.0)) < 1.0:
        text += f", with {fmt(v['retention'])} of subjects retained from one visit to the next"
    return text


DESIGN = Design(
    outcome="continuous",
    layout="repeated_measures",
    label="Continuous outcome, two groups with repeated measures",
    fields=FIELDS,
    forms=FORMS,
    solved="difference",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "mean_over_visits",
    groups=two_groups,
    allocation=two_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=warnings_for,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_asthma_visits.json",
    contrast=lambda q: (q.get("effect") or {}).get("difference"),
    null_effect=lambda q: 0.0,
)
