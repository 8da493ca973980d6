"""Continuous outcome, 2×2 crossover: every subject receives both treatments, in the sequence
reference→treatment (RT, the first group) or treatment→reference (TR, the second group).

The analysis is the crossover t test: each subject's half period difference (period 1 − period 2)/2
is compared between the two sequences with a pooled t test on N − 2 degrees of freedom, which
removes subject and period effects (Jones & Kenward 2003, ch. 2). Its standard error is
σ_w·√(½·(1/n₁ + 1/n₂)), σ_w the within-subject SD (σ_w·√(2/N) for equal sequences). Power is the
noncentral t, exact; equivalence by two one-sided tests with exact power over the variance
estimate (Owen 1965; Phillips 1990).
"""

from __future__ import annotations

import math

from ..errors import QuestionError
from ..quantiles import power_unreachable, root, solve_effect_or_raise, solve_n_or_raise, t_power
from . import continuous_two_groups as parallel
from .base import (
    TESTING_AIMS,
    Analysis,
    Design,
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
        "difference",
        "effect",
        "number",
        "Expected difference in means, treatment minus reference, within the same subjects.",
        "difference in means",
        unit="outcome units",
    ),
    Field(
        "sd_within",
        "assumptions",
        "number",
        "Within-subject standard deviation: the spread of one subject's repeated measurements "
        "under the same treatment (the residual SD of the crossover analysis).",
        "within-subject standard deviation",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "sd_between",
        "assumptions",
        "number",
        "Between-subject standard deviation of the subjects' own levels; the crossover analysis "
        "removes it, so it only shapes the simulated data.",
        "between-subject standard deviation",
        unit="outcome units",
        minimum=0,
        default=0.0,
    ),
    Field(
        "period_effect",
        "assumptions",
        "number",
        "Mean change from period 1 to period 2 whatever the treatment; the crossover analysis "
        "removes it, so it only shapes the simulated data.",
        "period effect",
        unit="outcome units",
        default=0.0,
    ),
)
FORMS = (("sd_within",),)
ANALYSES = (
    Analysis(
        "crossover_t",
        "Crossover t test on the period differences",
        ("analytic", "simulation"),
        TESTING_AIMS,
        "Jones & Kenward 2003, ch. 2; power by the noncentral t (Owen 1965 for equivalence)",
    ),
)
SEQUENCES = ("reference_first", "treatment_first")

validate = make_validate(FIELDS, FORMS, "difference")


# --- the crossover t on any scale (the log-scale cells reuse it) -------------------------------


def standard_error(sd_within: float, n1: float, n2: float) -> float:
    """SE of the treatment difference: σ_w·√(½(1/n₁ + 1/n₂)) (half period differences)."""
    return sd_within * math.sqrt(0.5 * (1.0 / n1 + 1.0 / n2))


def power_at(
    q: dict, delta: float, sd_within: float, n1: float, n2: float, alpha: float, margin=None
) -> float:
    """Exact power of the crossover t at true difference ``delta`` (superiority, NI, TOST).

    ``margin`` overrides the hypothesis margin (the log-scale cells pass ln of their limit).
    """
    aim, posted, higher = hypothesis(q)
    margin = posted if margin is None else margin
    se = standard_error(sd_within, n1, n2)
    df = n1 + n2 - 2.0
    if aim == "superiority":
        return t_power(abs(delta) / se, df, alpha, tails(q))
    if aim == "noninferiority":
        sign = 1.0 if higher else -1.0
        return t_power(sign * (delta - margin) / se, df, alpha, 1)
    return parallel.tost_power(delta, se, margin, df, alpha)


def check_effect(q: dict, delta: float, margin: float | None, path: str, shown: str) -> None:
    """Refuse an effect that no sample size can turn into the target power."""
    aim, _, higher = hypothesis(q)
    if aim == "superiority":
        if delta == 0:
            raise QuestionError(
                path, f"must differ from its null value for superiority; got {shown}"
            )
        return
    if margin is None:
        raise QuestionError("hypothesis.margin", f"is required for a {aim} question")
    if aim == "noninferiority":
        if not (delta > margin if higher else delta < margin):
            side = "above" if higher else "below"
            raise QuestionError(
                path,
                f"{shown} must lie {side} the non-inferiority margin, or no sample size reaches "
                "the target power",
            )
    elif not abs(delta) < margin:
        raise QuestionError(path, f"{shown} must lie strictly inside the equivalence limits")


def solve_sizes(power_of, q: dict, path: str, value: float) -> Solution:
    """The unrounded subjects per sequence reaching the target power (root of the exact curve)."""
    r = two_group_allocation(q)[1]
    n1 = solve_n_or_raise(
        lambda n: power_of(n, r * n),
        float(q["target_power"]),
        max(2.0, 2.0 / r),
        field=path,
        value=value,
    )
    return Solution(per_group=[n1, r * n1])


# --- this cell ---------------------------------------------------------------------------------


def _sd(q: dict) -> float:
    return number(q, FIELDS, "sd_within")


def _margin(q: dict) -> float | None:
    return hypothesis(q)[1]


def _power(q: dict, delta: float, n1: float, n2: float, alpha: float) -> float:
    analysis_of(q, DESIGN, "analytic")
    return power_at(q, delta, _sd(q), n1, n2, alpha)


def solve_n(q: dict, alpha: float) -> Solution:
    """Subjects per sequence reaching the target power."""
    delta = number(q, FIELDS, "difference")
    check_effect(q, delta, _margin(q), "effect.difference", fmt(delta))
    return solve_sizes(
        lambda n1, n2: _power(q, delta, n1, n2, alpha), q, "effect.difference", delta
    )


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Exact power at the given subjects per sequence (at a zero difference: the test's size)."""
    delta = number(q, FIELDS, "difference")
    if not (delta == 0 and hypothesis(q)[0] == "superiority"):
        check_effect(q, delta, _margin(q), "effect.difference", fmt(delta))
    return _power(q, delta, float(per_group[0]), float(per_group[1]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """The smallest difference (largest, for equivalence) reaching the target power."""
    n1, n2 = float(per_group[0]), float(per_group[1])
    target = float(q["target_power"])
    aim, margin, higher = hypothesis(q)
    sign = 1.0 if higher else -1.0
    top = 4.0 * standard_error(_sd(q), n1, n2) + 10.0 * _sd(q)
    if aim == "superiority":
        x = solve_effect_or_raise(lambda d: _power(q, d, n1, n2, alpha), target, per_group, hi=top)
        return {"field": "difference", "value": float(sign * x)}
    if margin is None:
        raise QuestionError("hypothesis.margin", f"is required for a {aim} question")
    if aim == "noninferiority":
        x = solve_effect_or_raise(
            lambda d: _power(q, margin + sign * d, n1, n2, alpha), target, per_group, hi=top
        )
        return {"field": "difference", "value": float(margin + sign * x)}
    if _power(q, 0.0, n1, n2, alpha) < target:
        raise power_unreachable("sample_size.per_group", target, per_group)
    value = root(lambda d: _power(q, d, n1, n2, alpha) - target, 0.0, margin)
    return {"field": "difference", "value": float(value)}


def derive(q: dict) -> dict:
    """Nothing is derived: the within-subject SD is the analysis's own."""
    return {}


def describe(q: dict) -> dict:
    analysis = analysis_of(q, DESIGN, "analytic")
    aim, margin, higher = hypothesis(q)
    notes = [
        "Each subject's half period difference (period 1 − period 2)/2 is compared between the "
        "two sequences; subject and period effects cancel, and the standard error is "
        "σ_w·√(½(1/n₁ + 1/n₂)) with n₁ + n₂ − 2 degrees of freedom.",
        "The sizes count subjects per sequence (reference first, treatment first); every "
        "subject is measured in both periods. No carryover is assumed: a washout long enough "
        "for the first treatment's effect to vanish.",
    ]
    name = "noncentral t, crossover (N − 2 df), exact"
    ref = "Jones & Kenward (2003), Design and Analysis of Cross-Over Trials, ch. 2"
    if aim == "noninferiority":
        name = f"one-sided {name}, against the margin"
        notes.append(
            f"H0: the difference is {'at or below' if higher else 'at or above'} the margin "
            f"{margin:g}; noncentrality (difference − margin)/SE."
        )
    elif aim == "equivalence":
        name = "two one-sided tests (TOST), exact power by Owen's Q over the variance estimate"
        ref = f"Schuirmann (1987); Phillips (1990), J Pharmacokinet Biopharm 18:137; {ref}"
        notes.append(f"Equivalence limits ±{margin:g}.")
    return analytic_method(analysis, DESIGN.analysis(analysis).label, name, ref, notes, derive(q))


# --- simulation ---------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """The reference and treatment means with the within-subject SD (reference mean 0)."""
    sd = _sd(q)
    return [
        {"family": "normal", "mean": 0.0, "sd": sd},
        {"family": "normal", "mean": number(q, FIELDS, "difference"), "sd": sd},
    ]


def settings(q: dict) -> dict:
    v = values(q, FIELDS)
    return {
        "sd_between": float(v.get("sd_between") or 0.0),
        "period_effect": float(v.get("period_effect") or 0.0),
    }


def data_block(arms: list[dict], labels: list[str], extra: dict) -> dict:
    return {
        "reference": dict(arms[0]),
        "treatment": dict(arms[1]),
        "sd_between": extra["sd_between"],
        "period_effect": extra["period_effect"],
        "sequences": list(SEQUENCES),
    }


def approximate_n(plan, target: float) -> float | None:
    """Normal approximation for subjects per sequence (a start for the search)."""
    from ..quantiles import z

    gap = plan.models[1]["mean"] - plan.models[0]["mean"]
    sd = plan.models[0]["sd"]
    za = z(1 - plan.alpha / plan.rule.tails)
    zb = z(target)
    if plan.rule.aim == "superiority":
        return None if gap == 0 else (za + zb) ** 2 * sd * sd / gap**2 + 1  # SE² = σ_w²/n
    return None


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=parallel.null_data,
    kernels={"crossover_t": "crossover_t"},
    effect_axis=parallel.effect_axis,
    settings=settings,
    data_block=data_block,
    implied_contrast=parallel.implied_contrast,
    approximate_n=approximate_n,
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "difference")
    if value is None:
        return "the difference in means, treatment minus reference"
    return f"a difference in means of {fmt(value)} (treatment minus reference, within subjects)"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("sd_within") is None:
        return ""
    text = f"a within-subject standard deviation of {fmt(v['sd_within'])}"
    posted = q.get("assumptions") or {}
    extra = [
        f"{label} of {fmt(posted[name])}"
        for name, label in (
            ("sd_between", "a between-subject standard deviation"),
            ("period_effect", "a period effect"),
        )
        if posted.get(name) is not None
    ]
    if extra:
        text += " (" + " and ".join(extra) + ", which the crossover analysis removes)"
    return text


DESIGN = Design(
    outcome="continuous",
    layout="crossover",
    label="Continuous outcome, 2×2 crossover",
    fields=FIELDS,
    forms=FORMS,
    solved="difference",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "crossover_t",
    groups=two_groups,
    allocation=two_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_crossover_inhaler.json",
    contrast=lambda q: values(q, FIELDS).get("difference"),
    null_effect=lambda q: 0.0,
    notes=(
        "The two groups are the sequences: reference first, then treatment first; sizes count "
        "subjects per sequence.",
    ),
)
