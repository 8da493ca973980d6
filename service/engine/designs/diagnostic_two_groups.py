"""Diagnostic accuracy, two groups (controls and cases): the area under the ROC curve against a
null value.

The estimate is the Mann–Whitney AUC; the z test compares (Â − A₀)/SE₀ with the normal critical
value, SE₀ the standard error at the null value, and power is Φ((|A − A₀| − z_α·SE₀)/SE₁), SE₁
the standard error at the assumed AUC (Obuchowski 1998). The standard errors are Hanley &
McNeil's (1982) (Q₁ = A/(2 − A), Q₂ = 2A²/(1 + A)) or, as the alternative analysis, the
binormal variance with equal SDs (Obuchowski 1998): V = 0.0099·e^{−a²/2}·((5a² + 8) +
(a² + 8)/κ) per case, a = √2·Φ⁻¹(A), κ controls per case.

Groups in order: controls (subjects without the condition) first, then cases; the allocation
ratio is cases per control.
"""

from __future__ import annotations

import math

from scipy import special

from ..errors import QuestionError
from ..quantiles import root, solve_n_or_raise, z_alpha
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
    checked_analysis,
    fmt,
    hypothesis,
    make_validate,
    no_warnings,
    number,
    tails,
    two_group_allocation,
    two_groups,
    values,
)

_AUC = {"minimum": 0, "maximum": 1, "exclusive_minimum": True, "exclusive_maximum": True}
FIELDS = (
    Field(
        "auc",
        "effect",
        "number",
        "Expected area under the ROC curve of the test (the probability that a case scores "
        "higher than a control).",
        "area under the ROC curve",
        **_AUC,
    ),
    Field(
        "auc_null",
        "assumptions",
        "number",
        "Area under the ROC curve under the null hypothesis (0.5: no discrimination).",
        "null area under the ROC curve",
        default=0.5,
        **_AUC,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = ((),)
ANALYSES = (
    Analysis(
        "hanley_mcneil",
        "z test of the area under the ROC curve (Hanley–McNeil standard error)",
        ("analytic", "simulation"),
        ("superiority",),
        "Hanley & McNeil 1982; Obuchowski 1998",
    ),
    Analysis(
        "binormal",
        "z test of the area under the ROC curve (binormal standard error)",
        ("analytic",),
        ("superiority",),
        "Obuchowski 1998",
    ),
)
validate = make_validate(FIELDS, FORMS, "auc")


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def hanley_mcneil_variance(a: float, controls: float, cases: float) -> float:
    """Var(Â) of Hanley & McNeil (1982), with Q₁ = A/(2 − A), Q₂ = 2A²/(1 + A)."""
    q1, q2 = a / (2.0 - a), 2.0 * a * a / (1.0 + a)
    return (a * (1.0 - a) + (cases - 1.0) * (q1 - a * a) + (controls - 1.0) * (q2 - a * a)) / (
        cases * controls
    )


def binormal_variance(a: float, controls: float, cases: float) -> float:
    """Var(Â) under the binormal model with equal SDs (Obuchowski 1998)."""
    s = math.sqrt(2.0) * special.ndtri(a)
    kappa = controls / cases
    return 0.0099 * math.exp(-s * s / 2.0) * ((5 * s * s + 8) + (s * s + 8) / kappa) / cases


def _variance(analysis: str):
    return binormal_variance if analysis == "binormal" else hanley_mcneil_variance


def _aucs(q: dict) -> tuple[float, float]:
    a, a0 = number(q, FIELDS, "auc"), number(q, FIELDS, "auc_null")
    if a == a0:
        raise QuestionError("effect.auc", f"must differ from auc_null ({fmt(a0)}); got {fmt(a)}")
    return a, a0


def _power_at(analysis: str, a: float, a0: float, per_group: list[float], alpha: float, t: int):
    controls, cases = float(per_group[0]), float(per_group[1])
    var = _variance(analysis)
    se0 = math.sqrt(var(a0, controls, cases))
    se1 = math.sqrt(var(a, controls, cases))
    za = z_alpha(alpha, t)
    gap = abs(a - a0)
    p = special.ndtr((gap - za * se0) / se1)
    if t == 2:
        p += special.ndtr((-gap - za * se0) / se1)
    return float(min(p, 1.0))


def _sizes(per_group: list[float]) -> list[float]:
    if len(per_group) != 2 or min(float(n) for n in per_group) < 2:
        raise QuestionError(
            "sample_size.per_group",
            f"needs controls and cases, at least 2 each; got {list(per_group)}",
        )
    return [float(n) for n in per_group]


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded controls and cases reaching the target power."""
    analysis = _check(q)
    a, a0 = _aucs(q)
    ratio = float(q.get("allocation_ratio") or 1.0)
    n = solve_n_or_raise(
        lambda m: _power_at(analysis, a, a0, [m, m * ratio], alpha, tails(q)),
        float(q["target_power"]),
        2.0 / min(1.0, ratio),
        field="effect.auc",
        value=a,
    )
    return Solution(per_group=[n, n * ratio])


def power(q: dict, per_group: list[float], alpha: float) -> float:
    analysis = _check(q)
    a, a0 = _aucs(q)
    return _power_at(analysis, a, a0, _sizes(per_group), alpha, tails(q))


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the AUC nearest the null value (above it unless lower is better) reaching target."""
    analysis = _check(q)
    a0 = number(q, FIELDS, "auc_null")
    sizes = _sizes(per_group)
    target = float(q["target_power"])
    higher = hypothesis(q)[2]
    far = (1.0 - 1e-6) if higher else 1e-6

    def f(a: float) -> float:
        return _power_at(analysis, a, a0, sizes, alpha, tails(q)) - target

    if f(far) < 0:
        from ..quantiles import power_unreachable

        raise power_unreachable("sample_size.per_group", target, per_group)
    step = 1e-9 if higher else -1e-9
    return {"field": "auc", "value": root(f, a0 + step, far)}


def describe(q: dict) -> dict:
    analysis = _check(q)
    how = (
        "binormal variance with equal SDs, V = 0.0099·e^{−a²/2}·((5a² + 8) + (a² + 8)/κ)"
        if analysis == "binormal"
        else "Hanley–McNeil variance, Q₁ = A/(2 − A), Q₂ = 2A²/(1 + A)"
    )
    return analytic_method(
        analysis,
        DESIGN.analysis(analysis).label,
        f"normal approximation, standard errors under the null and the alternative ({how})",
        "Hanley & McNeil (1982), Radiology 143:29; Obuchowski (1998), Stat Methods Med Res 7:371",
        [
            "Power = Φ((|A − A₀| − z_α·SE₀)/SE₁), SE₀ at the null AUC and SE₁ at the assumed "
            "AUC, for the numbers of controls and cases.",
            "The groups are controls (first) and cases; the allocation ratio is cases per control.",
        ],
        {"binormal_separation": math.sqrt(2.0) * float(special.ndtri(number(q, FIELDS, "auc")))}
        if values(q, FIELDS).get("auc") is not None
        else {},
    )


# --- simulation -------------------------------------------------------------------------------


def _separation(a: float) -> float:
    return math.sqrt(2.0) * float(special.ndtri(a))


def default_data(q: dict) -> list[dict]:
    """Binormal scores: controls N(0, 1), cases N(√2·Φ⁻¹(AUC), 1)."""
    return [
        {"family": "normal", "mean": 0.0, "sd": 1.0},
        {"family": "normal", "mean": _separation(number(q, FIELDS, "auc")), "sd": 1.0},
    ]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    a0 = number(q, FIELDS, "auc_null")
    return [
        dict(arms[0]),
        {**arms[1], "mean": _separation(a0)},
    ], f"the cases' mean set so that the binormal AUC is the null value {fmt(a0)}"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    a0 = number(q, FIELDS, "auc_null")
    room = (1.0 - a0) if rule.direction > 0 else a0
    return EffectAxis(a0, rule.direction, room * (1 - 1e-6))


def _check_models(q: dict, arms: list[dict], labels: list[str]) -> None:
    for a, lab in zip(arms, labels, strict=True):
        if a.get("family") != "normal":
            raise QuestionError(
                f"simulation.data.{lab}.family",
                f"the AUC is simulated with binormal scores; got {a.get('family')!r}",
            )


def approximate_n(plan, target: float) -> float | None:
    a0 = plan.settings["auc_null"]
    sep = plan.models[1]["mean"] - plan.models[0]["mean"]
    a = float(special.ndtr(sep / math.sqrt(2.0)))
    if a == a0:
        return None
    ratio = plan.weights[1] / plan.weights[0]
    t = 2 if plan.rule.alternative == "two-sided" else 1
    try:
        return solve_n_or_raise(
            lambda m: _power_at("hanley_mcneil", a, a0, [m, m * ratio], plan.alpha, t),
            target,
            2.0 / min(1.0, ratio),
            field="effect.auc",
            value=a,
        )
    except QuestionError:
        return None


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"hanley_mcneil": "auc_z"},
    effect_axis=effect_axis,
    check_models=_check_models,
    settings=lambda q: {"auc_null": number(q, FIELDS, "auc_null")},
    data_block=lambda arms, labels, settings: {"controls": dict(arms[0]), "cases": dict(arms[1])},
    implied_contrast=None,  # the direction is the AUC against auc_null (design.contrast)
    approximate_n=approximate_n,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    a = values(q, FIELDS).get("auc")
    if a is None and record and record.get("effect"):
        a = record["effect"]["value"]
    return (
        "the area under the ROC curve" if a is None else f"an area under the ROC curve of {fmt(a)}"
    )


def assumptions_sentence(q: dict) -> str:
    return f"a null area under the ROC curve of {fmt(values(q, FIELDS).get('auc_null', 0.5))}"


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    return None if v.get("auc") is None else float(v["auc"]) - float(v.get("auc_null", 0.5))


DESIGN = Design(
    outcome="diagnostic",
    layout="two_groups",
    label="Diagnostic accuracy, controls and cases",
    fields=FIELDS,
    forms=FORMS,
    solved="auc",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "hanley_mcneil",
    groups=two_groups,
    allocation=two_group_allocation,
    derive=lambda q: {},
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(
        effect=effect_sentence,
        assumptions=assumptions_sentence,
        group_names=lambda q: ["controls", "cases"],
    ),
    example="northbridge_sepsis_score_auc.json",
    contrast=_contrast,
    null_effect=lambda q: float(values(q, FIELDS).get("auc_null", 0.5)),
)
