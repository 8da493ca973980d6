"""Continuous outcome, k treatment groups each compared with one shared control (many-to-one).

Dunnett's test (Dunnett 1955): the k t statistics share the control mean and the pooled SD, so
they are jointly multivariate t; the critical value and the power come from that joint law
(engine/manytoone.py). Bonferroni splits alpha over the k comparisons with the same joint power;
Holm (1979) and Hochberg (1988) are answered by simulation. Power is disjunctive (at least one
treatment group significant) or conjunctive (every one). Every treatment group is assumed to
differ from the control by the same difference; the control may be √k times as large as each
treatment group (the allocation that minimizes the variance of the k comparisons, Dunnett 1955).
"""

from __future__ import annotations

import math

from scipy import stats

from .. import manytoone, models
from ..errors import QuestionError
from ..quantiles import solve_effect_or_raise, solve_n_or_raise
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
    check_aim,
    fmt,
    make_validate,
    number,
    stated_effect,
    tails,
    values,
)

# The fields every many-to-one cell shares (the binary cell imports them with the layout
# functions below).
ARM_FIELDS = (
    Field(
        "treatment_count",
        "assumptions",
        "integer",
        "Number of treatment groups, each compared with the one control group.",
        "number of treatment groups",
        minimum=1,
        maximum=20,
    ),
    Field(
        "power_goal",
        "analysis_options",
        "choice",
        "What counts as success: at least one treatment group significant (any_treatment, "
        "disjunctive power) or every treatment group significant (all_treatments, conjunctive "
        "power).",
        "power goal",
        choices=("any_treatment", "all_treatments"),
        default="any_treatment",
    ),
    Field(
        "control_allocation",
        "analysis_options",
        "choice",
        "Size of the control group: equal to each treatment group (equal) or √k times as large "
        "(square_root, with k treatment groups).",
        "control group allocation",
        choices=("equal", "square_root"),
        default="equal",
    ),
)
FIELDS = (
    Field(
        "difference",
        "effect",
        "number",
        "Expected difference in means of each treatment group minus the control group.",
        "difference in means of each treatment group from the control",
        unit="outcome units",
    ),
    Field(
        "sd",
        "assumptions",
        "number",
        "Common standard deviation of the outcome in every group.",
        "standard deviation",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    *ARM_FIELDS,
)
FORMS = (("sd", "treatment_count"),)
# Bonferroni first: the analytic power printed beside a simulated Holm or Hochberg answer is the
# first analytic analysis's, and Bonferroni's is the right one (equal to Holm's for any treatment
# group, a lower bound for all). Dunnett stays the default (default_analysis).
ANALYSES = (
    Analysis(
        "bonferroni",
        "t tests with Bonferroni's split of alpha",
        ("analytic", "simulation"),
        ("superiority",),
        "Bonferroni inequality; power by the multivariate t",
    ),
    Analysis(
        "dunnett",
        "Dunnett's many-to-one test",
        ("analytic", "simulation"),
        ("superiority",),
        "Dunnett 1955; power by the multivariate t",
    ),
    Analysis(
        "holm",
        "t tests with Holm's step-down procedure",
        ("simulation",),
        ("superiority",),
        "Holm 1979; power by simulation (beside it, Bonferroni's analytic power: equal for any treatment group, a lower bound for all)",
    ),
    Analysis(
        "hochberg",
        "t tests with Hochberg's step-up procedure",
        ("simulation",),
        ("superiority",),
        "Hochberg 1988; power by simulation (beside it, Bonferroni's analytic power: a lower bound)",
    ),
)
GOAL_WORDS = {
    "any_treatment": "at least one treatment group significant (disjunctive power)",
    "all_treatments": "every treatment group significant (conjunctive power)",
}


def treatment_count(q: dict) -> int:
    return int(number(q, ARM_FIELDS, "treatment_count"))


def control_factor(q: dict) -> float:
    """Control size over each treatment group's size: 1, or √k."""
    if values(q, ARM_FIELDS).get("control_allocation") == "square_root":
        return math.sqrt(treatment_count(q))
    return 1.0


def goal(q: dict) -> str:
    return values(q, ARM_FIELDS).get("power_goal") or "any_treatment"


def groups(q: dict) -> int:
    return treatment_count(q) + 1


def allocation(q: dict) -> list[float]:
    """Control first, then the k treatment groups."""
    return [control_factor(q)] + [1.0] * treatment_count(q)


def derive(q: dict) -> dict:
    """The correlation of any two comparisons under the planned allocation: 1/(1 + n₀/nₜ)."""
    try:
        return {"comparison_correlation": 1.0 / (1.0 + control_factor(q))}
    except QuestionError:
        return {}


validate = make_validate(FIELDS, FORMS, "difference")


def check_arms(q: dict, design: Design) -> str:
    """The analysis of a many-to-one question; the analysis adjusts, so comparisons stays 1."""
    check_aim(q, design)
    if int((q.get("adjustments") or {}).get("comparisons") or 1) != 1:
        raise QuestionError(
            "adjustments.comparisons",
            "must be 1 for treatments against a shared control: the analysis itself adjusts "
            "for the k comparisons (choose it with analysis)",
        )
    return analysis_of(q, design, "analytic")


def _check(q: dict) -> str:
    return check_arms(q, DESIGN)


def error_df(per_group: list[float]) -> float:
    return float(sum(per_group)) - len(per_group)


def critical(analysis: str, alpha: float, per_group: list[float], tails_: int) -> float:
    """The critical value of |T| (two-sided) or T (one-sided) for the analysis."""
    df = error_df(per_group)
    if analysis == "dunnett":
        return manytoone.dunnett_critical(alpha, per_group, df, tails_)
    return manytoone.bonferroni_critical(alpha, len(per_group) - 1, df, tails_)


def _power_at(q: dict, difference: float, per_group: list[float], alpha: float) -> float:
    analysis = _check(q)
    if len(per_group) != groups(q):
        raise QuestionError(
            "sample_size.per_group",
            f"needs one entry for the control and one per treatment group ({groups(q)}); "
            f"got {len(per_group)}",
        )
    t = tails(q)
    c = critical(analysis, alpha, per_group, t)
    k = len(per_group) - 1
    # One-sided: the statistic turned towards the assumed effect (direction.py's rule).
    shown = abs(difference) if t == 1 else difference
    return manytoone.power(
        c, per_group, [shown] * k, number(q, FIELDS, "sd"), error_df(per_group), t, goal(q)
    )


def power(q: dict, per_group: list[float], alpha: float) -> float:
    return _power_at(q, number(q, FIELDS, "difference"), [float(n) for n in per_group], alpha)


def solve_n(q: dict, alpha: float) -> Solution:
    """The unrounded treatment-group size n (control a·n) reaching the target power."""
    _check(q)
    d = number(q, FIELDS, "difference")
    a, k = control_factor(q), treatment_count(q)
    n = solve_n_or_raise(
        lambda n: _power_at(q, d, [a * n] + [n] * k, alpha),
        float(q["target_power"]),
        2.0,
        field="effect.difference",
        value=d,
    )
    return Solution(per_group=[a * n] + [n] * k)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """The smallest difference (in the direction higher_is_better names) reaching the target."""
    _check(q)
    sizes = [float(n) for n in per_group]
    sd = number(q, FIELDS, "sd")
    x = solve_effect_or_raise(
        lambda x: _power_at(q, x, sizes, alpha),
        float(q["target_power"]),
        per_group,
        hi=20.0 * sd,
    )
    higher = (q.get("hypothesis") or {}).get("higher_is_better", True)
    return {"field": "difference", "value": x if higher else -x}


def describe(q: dict) -> dict:
    analysis = _check(q)
    k = treatment_count(q)
    approximation = (
        "multivariate t, Dunnett's critical value, by quadrature"
        if analysis == "dunnett"
        else "multivariate t at the Bonferroni t critical value, by quadrature"
    )
    return analytic_method(
        analysis,
        DESIGN.analysis(analysis).label,
        approximation,
        "Dunnett (1955)",
        [
            f"{k} treatment groups each compared with the control by a t statistic with the "
            "pooled SD of all groups (N − k − 1 df); the statistics are jointly multivariate t "
            "with correlation 1/(1 + n₀/nₜ) between any two comparisons.",
            f"Power: {GOAL_WORDS[goal(q)]}, every treatment group differing from the control "
            "by the same difference.",
            "The probabilities are two-dimensional integrals over the shared control mean and "
            "the pooled SD (Gauss-Hermite and Gauss-Legendre rules), as in Dunnett (1955).",
        ],
        derive(q),
    )


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    return []


# --- simulation ------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    d, sd, k = number(q, FIELDS, "difference"), number(q, FIELDS, "sd"), treatment_count(q)
    return [{"family": "normal", "mean": 0.0, "sd": sd}] + [
        {"family": "normal", "mean": d, "sd": sd} for _ in range(k)
    ]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    c0 = models.center(arms[0])
    return [arms[0]] + [models.shifted(a, c0 - models.center(a)) for a in arms[1:]], (
        "every treatment group shifted to the control mean; the type I error is the "
        "familywise rate (any treatment group significant)"
    )


def settings(q: dict) -> dict:
    return {"power_goal": goal(q)}


def data_block(arms: list[dict], labels: list[str], settings_: dict) -> dict:
    return {
        "control": models.public(arms[0]),
        "treatments": [models.public(a) for a in arms[1:]],
    }


def approximate_n(plan, target: float) -> float | None:
    """Control size from the Bonferroni normal approximation (the cost estimate's scale)."""
    k = len(plan.models) - 1
    d = models.center(plan.models[1]) - models.center(plan.models[0])
    sd = plan.models[0]["sd"]
    if d == 0:
        return None
    a = plan.weights[0] / plan.weights[1]
    z = stats.norm.isf(plan.alpha / (plan.rule.tails * k)) + stats.norm.ppf(target)
    return a * (z * sd / d) ** 2 * (1.0 + 1.0 / a)


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={a.name: "many_to_one" for a in ANALYSES},
    effect_axis=lambda q, rule: EffectAxis(0.0, rule.direction, math.inf),
    settings=settings,
    data_block=data_block,
    implied_contrast=lambda arms: models.center(arms[1]) - models.center(arms[0]),
    approximate_n=approximate_n,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "difference")
    if value is None:
        return "the difference in means of each treatment group from the control"
    return f"a difference in means of {fmt(value)} for each treatment group against the control"


def arms_words(q: dict) -> str:
    """The groups in words: '3 treatment groups and a control group as large as each …'."""
    v = values(q, ARM_FIELDS)
    control = (
        "a control group √k times as large as each treatment group"
        if v.get("control_allocation") == "square_root"
        else "a control group as large as each treatment group"
    )
    return f"{v['treatment_count']} treatment groups and {control}"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("sd") is None or v.get("treatment_count") is None:
        return ""
    return (
        f"{arms_words(q)}, a standard deviation of {fmt(v['sd'])} in every group, and power "
        f"meaning {GOAL_WORDS[goal(q)]}"
    )


DESIGN = Design(
    outcome="continuous",
    layout="treatments_vs_control",
    label="Continuous outcome, treatments against a shared control",
    fields=FIELDS,
    forms=FORMS,
    solved="difference",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "dunnett",
    groups=groups,
    allocation=allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=warnings_for,
    simulation=SIMULATION,
    phrases=Phrases(
        effect=effect_sentence,
        assumptions=assumptions_sentence,
        group_names=lambda q: ["control"] + [f"treatment {i + 1}" for i in range(groups(q) - 1)],
    ),
    example="northbridge_analgesia_three_doses.json",
    contrast=lambda q: (q.get("effect") or {}).get("difference"),
    null_effect=lambda q: 0.0,
)
