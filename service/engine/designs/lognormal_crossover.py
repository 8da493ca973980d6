"""Log-normal outcome (an exposure such as AUC or Cmax), 2×2 crossover: the ratio of geometric
means, treatment over reference, analyzed by the crossover t on the log scale. Against a margin
this is average bioequivalence: two one-sided tests (Schuirmann 1987) with exact power by Owen's
Q, integrating over the distribution of the variance estimate (Phillips 1990).

A ratio's margin is given on the log scale, as the effect is: ``hypothesis.margin`` = ln 1.25 =
0.2231 makes the limits 0.80–1.25 (exp(±margin)); ln 0.8 = −0.2231 is a non-inferiority margin of
0.80. The within-subject CV sets the log-scale SD: σ_w² = ln(1 + CV²).
"""

from __future__ import annotations

import math

from ..errors import QuestionError
from ..quantiles import power_unreachable, root, solve_effect_or_raise
from . import continuous_crossover as crossover
from . import continuous_two_groups as parallel
from .base import (
    TESTING_AIMS,
    Analysis,
    DecisionRule,
    Design,
    EffectAxis,
    Field,
    Phrases,
    SimulationModel,
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
    two_group_allocation,
    two_groups,
    values,
)

RATIO = Field(
    "ratio",
    "effect",
    "number",
    "Expected ratio of geometric means, treatment over reference (1 = no difference).",
    "ratio of geometric means",
    minimum=0,
    exclusive_minimum=True,
)


def cv_field(help_text: str, label: str) -> Field:
    return Field("cv", "assumptions", "number", help_text, label, minimum=0, exclusive_minimum=True)


FIELDS = (
    RATIO,
    cv_field(
        "Within-subject coefficient of variation of the exposure (e.g. 0.25 for 25 %), from a "
        "previous crossover study's residual variance.",
        "within-subject coefficient of variation",
    ),
)
FORMS = (("cv",),)
ANALYSES = (
    Analysis(
        "crossover_t",
        "Crossover t test on the log scale (two one-sided tests against limits)",
        ("analytic", "simulation"),
        TESTING_AIMS,
        "Schuirmann 1987; Phillips 1990 (exact power by Owen's Q); Diletti, Hauschke & "
        "Steinijans 1991",
    ),
)
validate = make_validate(FIELDS, FORMS, "ratio")


# --- the log scale, shared with the parallel cell ----------------------------------------------


def log_sd(cv: float) -> float:
    """The SD on the log scale of a log-normal variable with coefficient of variation ``cv``."""
    return math.sqrt(math.log1p(cv * cv))


def log_ratio(q: dict, fields: tuple[Field, ...]) -> float:
    return math.log(number(q, fields, "ratio"))


def check(q: dict, delta: float) -> None:
    aim, margin, _ = hypothesis(q)
    shown = f"{math.exp(delta):g}"
    crossover.check_effect(q, delta, margin, "effect.ratio", shown)


def limits_note(q: dict) -> str | None:
    aim, margin, higher = hypothesis(q)
    if aim == "equivalence":
        return (
            f"Equivalence limits {math.exp(-margin):.4g}–{math.exp(margin):.4g} on the ratio "
            f"(±{margin:g} on the log scale); both one-sided tests must reject."
        )
    if aim == "noninferiority":
        return f"Non-inferiority limit {math.exp(margin):.4g} on the ratio ({margin:g} on the log scale)."
    return None


def solve_ratio(q: dict, power_of, per_group: list[float], scale: float) -> dict:
    """The detectable ratio: the log difference solved as for a difference, then exponentiated."""
    target = float(q["target_power"])
    aim, margin, higher = hypothesis(q)
    sign = 1.0 if higher else -1.0
    top = 4.0 * scale + 20.0
    if aim == "superiority":
        x = solve_effect_or_raise(power_of, target, per_group, hi=top)
        return {"field": "ratio", "value": math.exp(sign * x)}
    if margin is None:
        raise QuestionError("hypothesis.margin", f"is required for a {aim} question")
    if aim == "noninferiority":
        x = solve_effect_or_raise(lambda d: power_of(margin + sign * d), target, per_group, hi=top)
        return {"field": "ratio", "value": math.exp(margin + sign * x)}
    if power_of(0.0) < target:
        raise power_unreachable("sample_size.per_group", target, per_group)
    # The larger ratio reaching the target; its reciprocal reaches it too (symmetric limits).
    return {"field": "ratio", "value": math.exp(root(lambda d: power_of(d) - target, 0.0, margin))}


def log_models(delta: float, sd: float) -> list[dict]:
    """The simulated log exposures: reference at 0, treatment at ln(ratio), SD on the log scale."""
    return [
        {"family": "normal", "mean": 0.0, "sd": sd},
        {"family": "normal", "mean": delta, "sd": sd},
    ]


def ratio_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """The ratio moves away from 1 (or from the limit exp(margin)); it stays above 0."""
    if rule.aim == "superiority":
        return EffectAxis(1.0, rule.direction, math.inf if rule.direction > 0 else 1.0)
    edge = math.exp(rule.margin)
    if rule.aim == "noninferiority":
        return EffectAxis(edge, rule.direction, math.inf if rule.direction > 0 else edge)
    return EffectAxis(edge, -1, edge - 1.0, inclusive=True)


def margin_words(q: dict) -> str:
    """The margin as limits on the ratio, with the log-scale number the investigator entered."""
    aim, margin, _ = hypothesis(q)
    if aim == "equivalence":
        return (
            f"to show average bioequivalence within the limits {math.exp(-margin):.4g} to "
            f"{math.exp(margin):.4g} on the ratio of geometric means (±{margin:.4g} on the log "
            "scale) by two one-sided tests (TOST)"
        )
    return (
        f"to show non-inferiority with a limit of {math.exp(margin):.4g} on the ratio of "
        f"geometric means ({margin:.4g} on the log scale)"
    )


def ratio_sentence(q: dict, record: dict | None, fields, reference: str) -> str:
    value = stated_effect(q, record, fields, "ratio")
    if value is None:
        return f"the ratio of geometric means, treatment over {reference}"
    return f"a ratio of geometric means of {fmt(value)} (treatment over {reference})"


# --- this cell ---------------------------------------------------------------------------------


def _sd(q: dict) -> float:
    return log_sd(number(q, FIELDS, "cv"))


def _power(q: dict, delta: float, n1: float, n2: float, alpha: float) -> float:
    analysis_of(q, DESIGN, "analytic")
    return crossover.power_at(q, delta, _sd(q), n1, n2, alpha)


def solve_n(q: dict, alpha: float):
    delta = log_ratio(q, FIELDS)
    check(q, delta)
    ratio = number(q, FIELDS, "ratio")
    return crossover.solve_sizes(
        lambda n1, n2: _power(q, delta, n1, n2, alpha), q, "effect.ratio", ratio
    )


def power(q: dict, per_group: list[float], alpha: float) -> float:
    delta = log_ratio(q, FIELDS)
    if not (delta == 0 and hypothesis(q)[0] == "superiority"):
        check(q, delta)
    return _power(q, delta, float(per_group[0]), float(per_group[1]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    n1, n2 = float(per_group[0]), float(per_group[1])
    scale = crossover.standard_error(_sd(q), n1, n2)
    return solve_ratio(q, lambda d: _power(q, d, n1, n2, alpha), per_group, scale)


def derive(q: dict) -> dict:
    """The log-scale SD the CV stands for, and the log ratio when given."""
    v = values(q, FIELDS)
    out: dict = {}
    if v.get("cv") is not None:
        out["sd_within_log"] = _sd(q)
    if v.get("ratio") is not None:
        out["log_ratio"] = math.log(float(v["ratio"]))
    return out


def describe(q: dict) -> dict:
    analysis = analysis_of(q, DESIGN, "analytic")
    aim = hypothesis(q)[0]
    notes = [
        "Analysis on the log scale: σ_w² = ln(1 + CV²); each subject's half period difference "
        "of log exposures is compared between the sequences, SE = σ_w·√(½(1/n₁ + 1/n₂)) "
        "(σ_w·√(2/N) for equal sequences), N − 2 degrees of freedom.",
        "The sizes count subjects per sequence (reference first, treatment first); no carryover "
        "is assumed.",
    ]
    note = limits_note(q)
    if note:
        notes.append(note)
    if aim == "equivalence":
        name = "two one-sided tests (TOST) on the log scale, exact power by Owen's Q"
    else:
        name = "noncentral t on the log scale, crossover (N − 2 df), exact"
    ref = (
        "Phillips (1990), J Pharmacokinet Biopharm 18:137; Diletti, Hauschke & Steinijans "
        "(1991), Int J Clin Pharmacol Ther Toxicol 29:1; Schuirmann (1987)"
    )
    return analytic_method(analysis, DESIGN.analysis(analysis).label, name, ref, notes, derive(q))


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=lambda q: log_models(log_ratio(q, FIELDS), _sd(q)),
    null_data=parallel.null_data,
    kernels={"crossover_t": "crossover_t"},
    effect_axis=ratio_axis,
    settings=lambda q: {"sd_between": 0.0, "period_effect": 0.0},
    data_block=lambda arms, labels, extra: {
        "scale": "log",
        "reference": dict(arms[0]),
        "treatment": dict(arms[1]),
        "sequences": list(crossover.SEQUENCES),
    },
    implied_contrast=parallel.implied_contrast,
    approximate_n=crossover.approximate_n,
)


# Average bioequivalence is shown by two one-sided tests at 0.05 each, i.e. the 90% confidence
# interval of the ratio inside the limits (Schuirmann 1987), not at the 0.025 of other margins.
BIOEQUIVALENCE_ALPHA = 0.05
BIOEQUIVALENCE_ALPHA_SOURCE = (
    "the convention for average bioequivalence (two one-sided tests, a 90% confidence interval "
    "inside the limits; Schuirmann 1987)"
)

DESIGN = Design(
    outcome="lognormal",
    layout="crossover",
    label="Log-normal outcome (ratio of geometric means), 2×2 crossover",
    fields=FIELDS,
    forms=FORMS,
    solved="ratio",
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
    phrases=Phrases(
        effect=lambda q, record: ratio_sentence(q, record, FIELDS, "reference"),
        assumptions=lambda q: (
            f"a within-subject coefficient of variation of {fmt(values(q, FIELDS)['cv'])}"
            if values(q, FIELDS).get("cv") is not None
            else ""
        ),
        margin=margin_words,
    ),
    example="northbridge_bioequivalence_crossover.json",
    contrast=lambda q: (
        math.log(values(q, FIELDS)["ratio"]) if values(q, FIELDS).get("ratio") else None
    ),
    null_effect=lambda q: 1.0,
    equivalence_alpha=BIOEQUIVALENCE_ALPHA,
    equivalence_alpha_source=BIOEQUIVALENCE_ALPHA_SOURCE,
    notes=(
        "Average bioequivalence is the equivalence aim: hypothesis.margin is on the log scale "
        "(ln 1.25 = 0.2231 gives the limits 0.80–1.25).",
    ),
)
