"""Binary outcome, k treatment groups each compared with one shared control (many-to-one).

Each treatment group is compared with the control by the two-proportion z test with the pair's
pooled proportion. The k statistics share the control's proportion, so they are jointly normal
in large samples with product-form correlations: under the null (every group at the control's
proportion) ρᵢⱼ = λᵢλⱼ, λᵢ = 1/√(1 + n₀/nᵢ), as for means (Dunnett 1955), so Dunnett's
many-to-one critical value is the multivariate normal's (engine/manytoone.py with the SD known).
Under the alternative the differences p̂ᵢ − p̂₀ have variances σᵢ² = p₀q₀/n₀ + pᵢqᵢ/nᵢ and
covariance p₀q₀/n₀, again of product form (λᵢ = √(p₀q₀/n₀)/σᵢ); the test rejects when
|p̂ᵢ − p̂₀| ≥ c·σ₀ᵢ (σ₀ᵢ the pooled null SE), so the power is the multivariate normal
probability at c·σ₀ᵢ/σᵢ (the Fleiss-type power of each z test, taken jointly). Bonferroni splits
alpha over the k comparisons with the same joint power; Holm (1979) and Hochberg (1988) are
answered by simulation. Every treatment group is assumed to have the same proportion; the
control may be √k times as large as each treatment group.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from .. import manytoone
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
    analytic_method,
    bernoulli_only,
    fmt,
    make_validate,
    number,
    stated_effect,
    tails,
    values,
)
from .continuous_treatments_vs_control import (
    ARM_FIELDS,
    GOAL_WORDS,
    allocation,
    arms_words,
    check_arms,
    control_factor,
    derive,
    goal,
    groups,
    settings,
    treatment_count,
)

_PROPORTION = {
    "unit": "proportion",
    "minimum": 0,
    "maximum": 1,
    "exclusive_minimum": True,
    "exclusive_maximum": True,
}
FIELDS = (
    Field(
        "p_treatment",
        "effect",
        "number",
        "Expected proportion with the outcome event in each treatment group.",
        "event proportion in each treatment group",
        **_PROPORTION,
    ),
    Field(
        "p_control",
        "assumptions",
        "number",
        "Expected proportion with the outcome event in the control group.",
        "event proportion in the control group",
        **_PROPORTION,
    ),
    *ARM_FIELDS,
)
FORMS = (("p_control", "treatment_count"),)
ANALYSES = (
    Analysis(
        "bonferroni",
        "pooled z tests with Bonferroni's split of alpha",
        ("analytic", "simulation"),
        ("superiority",),
        "Bonferroni inequality; power by the multivariate normal",
    ),
    Analysis(
        "dunnett",
        "Dunnett-type many-to-one test on pooled z statistics",
        ("analytic", "simulation"),
        ("superiority",),
        "Dunnett 1955 (critical value of the multivariate normal); power by the multivariate normal",
    ),
    Analysis(
        "holm",
        "pooled z tests with Holm's step-down procedure",
        ("simulation",),
        ("superiority",),
        "Holm 1979; power by simulation (beside it, Bonferroni's analytic power: equal for any treatment group, a lower bound for all)",
    ),
    Analysis(
        "hochberg",
        "pooled z tests with Hochberg's step-up procedure",
        ("simulation",),
        ("superiority",),
        "Hochberg 1988; power by simulation (beside it, Bonferroni's analytic power: a lower bound)",
    ),
)


validate = make_validate(FIELDS, FORMS, "p_treatment")


def _check(q: dict) -> str:
    return check_arms(q, DESIGN)


def critical(analysis: str, alpha: float, per_group: list[float], tails_: int) -> float:
    """The critical value of |Z| (two-sided) or Z (one-sided) for the analysis (normal law)."""
    if analysis == "dunnett":
        return manytoone.dunnett_critical(alpha, per_group, manytoone.NORMAL_DF, tails_)
    return float(stats.norm.isf(alpha / (tails_ * (len(per_group) - 1))))


def joint_power(
    c: float, per_group: list[float], p0: float, p1: float, tails_: int, goal_: str
) -> float:
    """Power of the k pooled z tests at critical value c, every treatment group at p1."""
    n0 = float(per_group[0])
    v0 = p0 * (1 - p0) / n0
    lam, theta, scale = [], [], []
    for n in per_group[1:]:
        n = float(n)
        sigma = math.sqrt(v0 + p1 * (1 - p1) / n)
        pbar = (n0 * p0 + n * p1) / (n0 + n)
        null_se = math.sqrt(pbar * (1 - pbar) * (1 / n0 + 1 / n))
        lam.append(math.sqrt(v0) / sigma)
        theta.append((p1 - p0) / sigma)
        scale.append(null_se / sigma)
    if tails_ == 1:
        theta = [abs(t) for t in theta]  # the statistic turned towards the assumed effect
    # every treatment group alike: one critical value on the alternative's scale
    c_alt = c * scale[0]
    lam_a, theta_a = np.array(lam), np.array(theta)
    if goal_ == "all_treatments":
        value = manytoone.prob_all(c_alt, lam_a, theta_a, manytoone.NORMAL_DF, tails_)
    else:
        value = 1.0 - manytoone.prob_none(c_alt, lam_a, theta_a, manytoone.NORMAL_DF, tails_)
    return min(max(value, 0.0), 1.0)


def _sizes(q: dict, per_group: list[float]) -> list[float]:
    if len(per_group) != groups(q):
        raise QuestionError(
            "sample_size.per_group",
            f"needs one entry for the control and one per treatment group ({groups(q)}); "
            f"got {len(per_group)}",
        )
    return [float(n) for n in per_group]


def _power_at(q: dict, p1: float, per_group: list[float], alpha: float) -> float:
    analysis = _check(q)
    sizes = _sizes(q, per_group)
    t = tails(q)
    c = critical(analysis, alpha, sizes, t)
    return joint_power(c, sizes, number(q, FIELDS, "p_control"), p1, t, goal(q))


def power(q: dict, per_group: list[float], alpha: float) -> float:
    return _power_at(q, number(q, FIELDS, "p_treatment"), per_group, alpha)


def solve_n(q: dict, alpha: float) -> Solution:
    """The unrounded treatment-group size n (control a·n) reaching the target power."""
    _check(q)
    p1 = number(q, FIELDS, "p_treatment")
    if p1 == number(q, FIELDS, "p_control"):
        raise QuestionError(
            "effect.p_treatment", "equals p_control: there is no difference to detect"
        )
    a, k = control_factor(q), treatment_count(q)
    n = solve_n_or_raise(
        lambda n: _power_at(q, p1, [a * n] + [n] * k, alpha),
        float(q["target_power"]),
        2.0,
        field="effect.p_treatment",
        value=p1,
    )
    return Solution(per_group=[a * n] + [n] * k)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """The treatment proportion nearest the control's (in the direction higher_is_better names)
    that reaches the target power."""
    _check(q)
    sizes = _sizes(q, per_group)
    p0 = number(q, FIELDS, "p_control")
    higher = (q.get("hypothesis") or {}).get("higher_is_better", True)
    sign = 1.0 if higher else -1.0
    room = (1.0 - p0 if higher else p0) - 1e-9
    x = solve_effect_or_raise(
        lambda x: _power_at(q, p0 + sign * x, sizes, alpha),
        float(q["target_power"]),
        per_group,
        hi=room,
    )
    return {"field": "p_treatment", "value": p0 + sign * x}


def describe(q: dict) -> dict:
    analysis = _check(q)
    k = treatment_count(q)
    approximation = (
        "multivariate normal, Dunnett-type critical value, by quadrature"
        if analysis == "dunnett"
        else "multivariate normal at the Bonferroni z critical value, by quadrature"
    )
    return analytic_method(
        analysis,
        DESIGN.analysis(analysis).label,
        approximation,
        "Dunnett (1955); Fleiss, Levin & Paik (2003) for each pooled z test",
        [
            f"{k} treatment groups each compared with the control by the two-proportion z test "
            "with the pair's pooled proportion; in large samples the statistics are jointly "
            "normal with correlation 1/(1 + n₀/nₜ) between any two comparisons under the null.",
            f"Power: {GOAL_WORDS[goal(q)]}, every treatment group at the same proportion; the "
            "comparisons' correlation under the alternative follows from the proportions.",
            "The probabilities are one-dimensional integrals over the shared control proportion "
            "(Gauss-Hermite rule), as in Dunnett (1955) with the SD known.",
        ],
        derive(q),
    )


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    p0 = values(q, FIELDS).get("p_control")
    if p0 is None or not per_group:
        return []
    expected = min(float(per_group[0]) * p0, float(per_group[0]) * (1 - p0))
    if expected < 5:
        return [
            f"fewer than 5 expected events or non-events in the control group ({expected:.1f}); "
            "the normal approximation of the z tests is poor: check by simulation"
        ]
    return []


# --- simulation ------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    p0, p1, k = (
        number(q, FIELDS, "p_control"),
        number(q, FIELDS, "p_treatment"),
        treatment_count(q),
    )
    return [{"family": "bernoulli", "p": p0}] + [{"family": "bernoulli", "p": p1} for _ in range(k)]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    p0 = arms[0]["p"]
    return [arms[0]] + [{"family": "bernoulli", "p": p0} for _ in arms[1:]], (
        f"every treatment group's p set to the control's ({p0:g}); the type I error is the "
        "familywise rate (any treatment group significant)"
    )


def data_block(arms: list[dict], labels: list[str], settings_: dict) -> dict:
    return {
        "control": {"family": "bernoulli", "p": arms[0]["p"]},
        "treatments": [{"family": "bernoulli", "p": a["p"]} for a in arms[1:]],
    }


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """p_treatment moves away from p_control in the rule's direction."""
    p0 = number(q, FIELDS, "p_control")
    sign = rule.direction
    return EffectAxis(p0, sign, 1.0 - p0 if sign > 0 else p0)


def approximate_n(plan, target: float) -> float | None:
    """Control size from the Bonferroni normal approximation (the cost estimate's scale)."""
    k = len(plan.models) - 1
    p0, p1 = plan.models[0]["p"], plan.models[1]["p"]
    if p0 == p1:
        return None
    a = plan.weights[0] / plan.weights[1]
    z = stats.norm.isf(plan.alpha / (plan.rule.tails * k)) + stats.norm.ppf(target)
    n = z * z * (p0 * (1 - p0) / a + p1 * (1 - p1)) / (p1 - p0) ** 2
    return a * n


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={a.name: "many_to_one_binary" for a in ANALYSES},
    effect_axis=effect_axis,
    check_models=bernoulli_only,
    settings=settings,
    data_block=data_block,
    implied_contrast=lambda arms: arms[1]["p"] - arms[0]["p"],
    approximate_n=approximate_n,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "p_treatment")
    if value is None:
        return "the event proportion in each treatment group"
    return f"an event proportion of {fmt(value)} in each treatment group"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("p_control") is None or v.get("treatment_count") is None:
        return ""
    return (
        f"{arms_words(q)}, an event proportion of {fmt(v['p_control'])} in the control group, "
        f"and power meaning {GOAL_WORDS[goal(q)]}"
    )


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    if v.get("p_treatment") is None or v.get("p_control") is None:
        return None
    return float(v["p_treatment"]) - float(v["p_control"])


DESIGN = Design(
    outcome="binary",
    layout="treatments_vs_control",
    label="Binary outcome, treatments against a shared control",
    fields=FIELDS,
    forms=FORMS,
    solved="p_treatment",
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
    example="northbridge_wound_dressings_three_arm.json",
    contrast=_contrast,
    null_effect=lambda q: values(q, FIELDS).get("p_control"),
)
