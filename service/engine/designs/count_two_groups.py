"""Event counts, two parallel groups: the ratio of event rates, treatment over control, by the Wald
test of the log rate ratio. Each subject's count is Poisson, or negative binomial (gamma-Poisson)
with overdispersion κ: a subject followed for time t at rate λ has mean μ = λt and variance μ + κμ²
(κ = 0 is Poisson). Each group's rate is estimated by its events over its total follow-up.

The variance of a group's log rate per subject is 1/(λ·t̄) + κ·E[t²]/t̄² (t̄ the mean follow-up);
with the same follow-up for everyone this is Zhu & Lakkis (2014)'s 1/(λt) + κ, where the rate
estimate is the negative binomial maximum likelihood estimate. Sizes come from the normal
approximation n_c = (z_α·√W₀ + z_β·√W₁)² / ln²(RR), W₁ the variance under the alternative and W₀
under the null: the Wald test estimates the variance without constraint, so W₀ = W₁ by default;
``null_variance: pooled`` takes W₀ at the null rates that keep the expected total events (Zhu &
Lakkis 2014; Zhu 2017 for a margin). Follow-up may vary by staggered entry: with an accrual
period A and a common study end, each subject's follow-up is uniform on [F, F + A].

A ratio's margin is on the log scale, as for the log-normal cells: ln 1.25 = 0.2231 is a
non-inferiority limit of 1.25 on the rate ratio when fewer events are better
(``higher_is_better: false``).
"""

from __future__ import annotations

import math

from scipy import optimize, special

from .. import models
from ..errors import QuestionError
from ..quantiles import (
    power_unreachable,
    root,
    solve_effect_or_raise,
    solve_n_or_raise,
    z,
    z_alpha,
)
from . import lognormal_crossover as ratio_cell
from . import time_to_event_two_groups as tte
from .base import AIMS, Analysis, DecisionRule, Design, Field, Phrases, SimulationModel, Solution
from .common import (
    analysis_of,
    analytic_method,
    fmt,
    hypothesis,
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
        "rate_ratio",
        "effect",
        "number",
        "Ratio of the event rates, treatment over control (1 = no difference).",
        "rate ratio",
        minimum=0,
        exclusive_minimum=True,
    ),
    tte.DESIGN.field("time_unit"),
    Field(
        "control_rate",
        "assumptions",
        "number",
        "Expected events per subject per time unit in the control group.",
        "event rate in the control group",
        unit="per time unit",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "follow_up",
        "assumptions",
        "number",
        "Follow-up (exposure) of each subject; with an accrual period, the follow-up of the "
        "last subject enrolled.",
        "follow-up per subject",
        unit="time units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "accrual",
        "assumptions",
        "number",
        "Length of a uniform accrual period when every subject is followed to a common study "
        "end: follow-up then spreads evenly from follow_up to follow_up + accrual; 0 when "
        "every subject is followed for the same time.",
        "accrual period",
        unit="time units",
        minimum=0,
        default=0.0,
    ),
    Field(
        "overdispersion",
        "assumptions",
        "number",
        "Negative binomial overdispersion κ of a subject's count: variance = μ + κμ² for a count "
        "with mean μ; 0 for Poisson counts.",
        "negative binomial overdispersion",
        minimum=0,
        default=0.0,
    ),
    Field(
        "null_variance",
        "analysis_options",
        "choice",
        "Variance of the log rate ratio under the null in the sample-size formula: "
        "'alternative' (the Wald test's, the default) or 'pooled' (at the null rates that keep "
        "the expected total events).",
        "variance under the null",
        choices=("alternative", "pooled"),
        default="alternative",
    ),
)
FORMS = (("time_unit", "control_rate", "follow_up"),)
ANALYSES = (
    Analysis(
        "negative_binomial_wald",
        "Wald test of the log rate ratio, negative binomial variance",
        ("analytic", "simulation"),
        AIMS,
        "Zhu & Lakkis 2014; Zhu 2017 (non-inferiority and equivalence)",
    ),
    Analysis(
        "poisson_wald",
        "Wald test of the log rate ratio, Poisson variance",
        ("analytic", "simulation"),
        AIMS,
        "Poisson rates compared on the log scale (Zhu & Lakkis 2014 with κ = 0)",
    ),
)
validate = make_validate(FIELDS, FORMS, "rate_ratio")


def default_analysis(q: dict) -> str:
    """Poisson counts are tested with the Poisson variance, overdispersed counts with the NB."""
    return (
        "poisson_wald" if not values(q, FIELDS).get("overdispersion") else "negative_binomial_wald"
    )


# --- follow-up ------------------------------------------------------------------------------


def exposure(q: dict) -> tuple[float, float]:
    """The mean follow-up t̄ and ρ = E[t²]/t̄² (1 when every subject has the same follow-up)."""
    f = number(q, FIELDS, "follow_up")
    a = number(q, FIELDS, "accrual")
    return exposure_of(f, a)


def exposure_of(f: float, a: float) -> tuple[float, float]:
    """Mean and ρ of follow-up uniform on [f, f + a]."""
    mean = f + a / 2.0
    return mean, 1.0 + (a * a / 12.0) / (mean * mean)


def _setup(q: dict) -> dict:
    """The checked inputs of the analytic method."""
    analysis = analysis_of(q, DESIGN, "analytic")
    kappa = number(q, FIELDS, "overdispersion")
    if analysis == "poisson_wald" and kappa > 0:
        raise QuestionError(
            "analysis",
            "poisson_wald ignores the assumed overdispersion "
            f"({kappa:g}): its type I error would exceed alpha; use negative_binomial_wald, or "
            "simulate poisson_wald to see by how much",
        )
    aim, margin, _ = hypothesis(q)
    how = values(q, FIELDS)["null_variance"]
    if how == "pooled" and aim == "equivalence":
        raise QuestionError(
            "analysis_options.null_variance",
            "'pooled' answers superiority and non-inferiority; an equivalence question uses "
            "'alternative'",
        )
    mean, rho = exposure(q)
    return {
        "rate": number(q, FIELDS, "control_rate"),
        "kappa": kappa,
        "mean": mean,
        "rho": rho,
        "null_variance": how,
        "aim": aim,
        "margin": margin,
    }


def variances(s: dict, delta: float, n0: float, n1: float) -> tuple[float, float]:
    """(W₀, W₁): the variance of the log rate ratio under the null and the alternative.

    ``delta`` is the true log rate ratio; ``n0``, ``n1`` the control and treatment sizes.
    """
    lam0, lam1 = s["rate"], s["rate"] * math.exp(delta)
    t, extra = s["mean"], s["kappa"] * s["rho"]
    v1 = (1.0 / (lam0 * t) + extra) / n0 + (1.0 / (lam1 * t) + extra) / n1
    if s["null_variance"] == "alternative":
        return v1, v1
    null_ratio = math.exp(s["margin"]) if s["aim"] == "noninferiority" else 1.0
    # The null rates (λ̃, M·λ̃) with the expected total events of the alternative.
    base = (n0 * lam0 + n1 * lam1) / (n0 + n1 * null_ratio)
    v0 = (1.0 / (base * t) + extra) / n0 + (1.0 / (base * null_ratio * t) + extra) / n1
    return v0, v1


def power_at(q: dict, s: dict, delta: float, n0: float, n1: float, alpha: float) -> float:
    """Normal-approximation power of the Wald test at true log rate ratio ``delta``."""
    v0, v1 = variances(s, delta, n0, n1)
    r0, r1 = math.sqrt(v0), math.sqrt(v1)
    aim, margin, higher = hypothesis(q)
    if aim == "superiority":
        k = tails(q)
        za = z_alpha(alpha, k)
        power = special.ndtr((abs(delta) - za * r0) / r1)
        if k == 2:
            power += special.ndtr((-abs(delta) - za * r0) / r1)
        return float(power)
    za = z(1.0 - alpha)
    if aim == "noninferiority":
        gap = (1.0 if higher else -1.0) * (delta - margin)
        return float(special.ndtr((gap - za * r0) / r1))
    inside = special.ndtr((margin - delta) / r1 - za) + special.ndtr((margin + delta) / r1 - za)
    return float(max(inside - 1.0, 0.0))


def _delta(q: dict) -> float:
    return math.log(number(q, FIELDS, "rate_ratio"))


def solve_n(q: dict, alpha: float) -> Solution:
    """Subjects per group reaching the target power (root of the normal-approximation curve)."""
    s = _setup(q)
    delta = _delta(q)
    ratio_cell.check(q, delta)
    r = two_group_allocation(q)[1]
    n0 = solve_n_or_raise(
        lambda n: power_at(q, s, delta, n, r * n, alpha),
        float(q["target_power"]),
        max(2.0, 2.0 / r),
        field="effect.rate_ratio",
        value=number(q, FIELDS, "rate_ratio"),
    )
    return Solution(per_group=[n0, r * n0])


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Power at the given sizes; a rate ratio of 1 under superiority gives the test's size."""
    s = _setup(q)
    delta = _delta(q)
    if not (delta == 0 and s["aim"] == "superiority"):
        ratio_cell.check(q, delta)
    return power_at(q, s, delta, float(per_group[0]), float(per_group[1]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """The detectable rate ratio nearest 1 (or the limit) reaching the target power.

    Superiority looks on the side ``higher_is_better`` names. Below 1 the power is not monotone
    in |ln RR|: fewer treatment events add noise, so it peaks and falls again; the answer is
    the crossing before the peak.
    """
    s = _setup(q)
    n0, n1 = float(per_group[0]), float(per_group[1])
    if s["aim"] != "superiority":
        scale = math.sqrt(variances(s, 0.0, n0, n1)[1])
        found = ratio_cell.solve_ratio(
            q, lambda d: power_at(q, s, d, n0, n1, alpha), per_group, scale
        )
        return {"field": "rate_ratio", "value": found["value"]}
    target = float(q["target_power"])
    if hypothesis(q)[2]:
        x = solve_effect_or_raise(
            lambda d: power_at(q, s, d, n0, n1, alpha), target, per_group, hi=4.0
        )
        return {"field": "rate_ratio", "value": math.exp(x)}

    def lower(d: float) -> float:
        return power_at(q, s, -d, n0, n1, alpha)

    peak = optimize.minimize_scalar(lambda d: -lower(d), bounds=(0.0, 40.0), method="bounded")
    if -peak.fun < target:
        raise power_unreachable("sample_size.per_group", target, per_group)
    x = root(lambda d: lower(d) - target, 0.0, float(peak.x))
    return {"field": "rate_ratio", "value": math.exp(-x)}


def derive(q: dict) -> dict:
    """The log rate ratio, the mean follow-up and the events a subject is expected to have."""
    v = values(q, FIELDS)
    out: dict = {}
    if v.get("rate_ratio") is not None:
        out["log_rate_ratio"] = math.log(float(v["rate_ratio"]))
    if v.get("follow_up") is not None:
        mean, rho = exposure(q)
        out["mean_follow_up"] = mean
        if rho != 1.0:
            out["follow_up_spread"] = rho  # E[t²]/t̄²
        if v.get("control_rate") is not None:
            out["events_per_subject_control"] = float(v["control_rate"]) * mean
            if v.get("rate_ratio") is not None:
                out["events_per_subject_treatment"] = (
                    float(v["control_rate"]) * float(v["rate_ratio"]) * mean
                )
    return out


def describe(q: dict) -> dict:
    """The analytic method block."""
    s = _setup(q)
    analysis = analysis_of(q, DESIGN, "analytic")
    notes = [
        "Each group's rate is its events over its total follow-up; the log rate ratio has "
        "variance W/n per group with W = 1/(λ·t̄) + κ·E[t²]/t̄² (κ the overdispersion, "
        "Var = μ + κμ²; t̄ the mean follow-up).",
    ]
    if s["rho"] != 1.0:
        notes.append(
            "Follow-up is uniform between follow_up and follow_up + accrual (staggered entry, "
            "a common study end); with unequal follow-up the events-over-exposure estimate is "
            "less efficient than a negative binomial regression, and the formula is for it."
        )
    if s["null_variance"] == "pooled":
        name = (
            "normal approximation, n = (z_α·√W₀ + z_β·√W₁)² / (ln RR − ln RR₀)², W₀ at the null "
            "rates that keep the expected total events"
        )
    else:
        name = "normal approximation to the Wald test, n = (z_α + z_β)²·W₁ / (ln RR − ln RR₀)²"
    note = ratio_limits_note(q)
    if note:
        notes.append(note)
    ref = (
        "Zhu & Lakkis (2014), Stat Med 33:376; Zhu (2017), Stat Biopharm Res "
        "(doi 10.1080/19466315.2016.1225594)"
    )
    return analytic_method(analysis, DESIGN.analysis(analysis).label, name, ref, notes, derive(q))


def ratio_limits_note(q: dict) -> str | None:
    """The margin as limits on the rate ratio."""
    aim, margin, _ = hypothesis(q)
    if aim == "equivalence":
        return (
            f"Equivalence limits {math.exp(-margin):.4g}–{math.exp(margin):.4g} on the rate "
            f"ratio (±{margin:g} on the log scale); both one-sided tests must reject."
        )
    if aim == "noninferiority":
        return (
            f"Non-inferiority limit {math.exp(margin):.4g} on the rate ratio ({margin:g} on the "
            "log scale)."
        )
    return None


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    """Few expected events make the normal approximation rough."""
    v = values(q, FIELDS)
    if v.get("rate_ratio") is None or v.get("control_rate") is None:
        return []
    mean, _ = exposure(q)
    lam0 = float(v["control_rate"])
    events = [
        float(per_group[0]) * lam0 * mean,
        float(per_group[1]) * lam0 * v["rate_ratio"] * mean,
    ]
    out = []
    if min(events) < 20:
        out.append(
            f"Only {min(events):.1f} events are expected in a group: the normal approximation "
            "of the log rate ratio is rough with so few; a simulation is safer."
        )
    smallest = min(float(n) for n in per_group)
    if v.get("overdispersion") and smallest < 50:
        out.append(
            f"With {smallest:.0f} subjects in a group the overdispersion is estimated from few "
            "counts and the Wald test can exceed alpha; the simulation method reports its type "
            "I error."
        )
    return out


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Each group's count at the mean follow-up: Poisson, or negative binomial with size 1/κ."""
    lam0 = number(q, FIELDS, "control_rate")
    ratio = number(q, FIELDS, "rate_ratio")
    kappa = number(q, FIELDS, "overdispersion")
    mean, _ = exposure(q)
    out = []
    for lam in (lam0, lam0 * ratio):
        if kappa > 0:
            out.append({"family": "negative_binomial", "mean": lam * mean, "dispersion": 1 / kappa})
        else:
            out.append({"family": "poisson", "mean": lam * mean})
    return out


def settings(q: dict) -> dict:
    """What a chunk needs beyond the groups: κ and the follow-up."""
    if values(q, FIELDS)["null_variance"] != "alternative":
        raise QuestionError(
            "analysis_options.null_variance",
            "'pooled' changes only the sample-size formula; a simulation runs the Wald test "
            "itself: remove null_variance or use the analytic method",
        )
    return {
        "overdispersion": number(q, FIELDS, "overdispersion"),
        "follow_up": number(q, FIELDS, "follow_up"),
        "accrual": number(q, FIELDS, "accrual"),
    }


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    """The treatment rate at the control's (or at the limit of the margin)."""
    if rule.aim == "superiority":
        return [arms[0], dict(arms[0])], "treatment counts drawn at the control rate (ratio 1)"
    limit = math.exp(float(rule.margin))
    treated = {**arms[0], "mean": arms[0]["mean"] * limit}
    return [arms[0], treated], (
        f"treatment rate set to {limit:.4g} times the control rate, the limit of the margin"
    )


def data_block(arms: list[dict], labels: list[str], extra: dict) -> dict:
    """The simulated counts in the cell's own words (rates per time unit, κ, follow-up)."""
    mean, _ = exposure_of(extra["follow_up"], extra["accrual"])
    return {
        "counts": "negative binomial (gamma-Poisson)" if extra["overdispersion"] > 0 else "Poisson",
        "control": {"rate": arms[0]["mean"] / mean, "mean_count": arms[0]["mean"]},
        "treatment": {"rate": arms[1]["mean"] / mean, "mean_count": arms[1]["mean"]},
        "overdispersion": extra["overdispersion"],
        "follow_up": extra["follow_up"],
        "accrual": extra["accrual"],
        "variance": "mean + overdispersion·mean² per subject",
        "test": (
            "each group's rate is its events over its follow-up; negative_binomial_wald "
            "estimates the overdispersion in every replicate by the method of moments, pooled over "
            "both groups and truncated at 0; poisson_wald uses 1/events per group; a replicate "
            "in which a group has no events does not reject"
        ),
    }


def approximate_n(plan, target: float) -> float | None:
    """The Wald formula's control-group size (the simulated search's start)."""
    s = plan.settings
    mean, rho = exposure_of(s["follow_up"], s["accrual"])
    lam0, lam1 = (a["mean"] / mean for a in plan.models)
    r = plan.weights[1] / plan.weights[0]
    rule = plan.rule
    gap = math.log(lam1 / lam0) - (rule.margin if rule.aim != "superiority" else 0.0)
    if gap == 0:
        return None
    extra = s["overdispersion"] * rho
    w = 1.0 / (lam0 * mean) + extra + (1.0 / (lam1 * mean) + extra) / r
    za = z(1.0 - plan.alpha / (rule.tails if rule.aim == "superiority" else 1))
    return max(2.0, (za + z(target)) ** 2 * w / gap**2)


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"negative_binomial_wald": "rate_wald", "poisson_wald": "rate_wald"},
    effect_axis=ratio_cell.ratio_axis,
    settings=settings,
    data_block=data_block,
    implied_contrast=lambda arms: models.center(arms[1]) - models.center(arms[0]),
    approximate_n=approximate_n,
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "rate_ratio")
    if value is None:
        return "the rate ratio, treatment over control"
    return f"a rate ratio of {fmt(value)} (treatment over control)"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("control_rate") is None or v.get("follow_up") is None:
        return ""
    unit = v.get("time_unit") or "time units"
    per = unit[:-1] if unit.endswith("s") else unit

    def span(x: float) -> str:
        return f"{fmt(x)} {per if x == 1 else unit}"

    parts = [f"a control rate of {fmt(v['control_rate'])} events per subject per {per}"]
    if v.get("accrual"):
        parts.append(
            f"follow-up from {fmt(v['follow_up'])} to {span(v['follow_up'] + v['accrual'])} "
            f"per subject (uniform accrual over {span(v['accrual'])}, a common study end)"
        )
    else:
        parts.append(f"{span(v['follow_up'])} of follow-up per subject")
    if v.get("overdispersion"):
        k = fmt(v["overdispersion"])
        parts.append(f"a negative binomial overdispersion of {k} (variance = mean + {k}·mean²)")
    else:
        parts.append("Poisson counts (no overdispersion)")
    return ", ".join(parts[:-1]) + " and " + parts[-1]


def margin_words(q: dict) -> str:
    aim, margin, _ = hypothesis(q)
    if aim == "equivalence":
        return (
            f"to show equivalence within the limits {math.exp(-margin):.4g} to "
            f"{math.exp(margin):.4g} on the rate ratio (±{margin:.4g} on the log scale) by two "
            "one-sided tests (TOST)"
        )
    return (
        f"to show non-inferiority with a limit of {math.exp(margin):.4g} on the rate ratio "
        f"({margin:.4g} on the log scale)"
    )


DESIGN = Design(
    outcome="count",
    layout="two_groups",
    label="Event counts (rate ratio), two groups",
    fields=FIELDS,
    forms=FORMS,
    solved="rate_ratio",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=default_analysis,
    groups=two_groups,
    allocation=two_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=warnings_for,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence, margin=margin_words),
    example="northbridge_asthma_exacerbations.json",
    contrast=lambda q: (
        math.log(values(q, FIELDS)["rate_ratio"])
        if isinstance(values(q, FIELDS).get("rate_ratio"), (int, float))
        and values(q, FIELDS)["rate_ratio"] > 0
        else None
    ),
    null_effect=lambda q: 1.0,
    notes=(
        "hypothesis.margin is on the log scale (ln 1.25 = 0.2231 is a limit of 1.25 on the "
        "rate ratio); when fewer events are better, set higher_is_better to false.",
        "overdispersion is κ in variance = μ + κμ² (a simulation data model's negative_binomial "
        "'dispersion' is the size 1/κ).",
    ),
)
