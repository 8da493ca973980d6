"""Continuous outcome, two groups: pooled (Student) and Welch t, exact power, non-inferiority and
equivalence (TOST); the rank-sum test by Noether under the normal model."""

from __future__ import annotations

import math
from collections.abc import Callable

from scipy import integrate, special, stats

from .. import models, precision
from ..errors import QuestionError
from ..quantiles import power_unreachable, root, solve_effect_or_raise, solve_n_or_raise, t_power
from . import ordinal_two_groups as noether
from .base import (
    TESTING_AIMS,
    Analysis,
    ClusterSupport,
    DecisionRule,
    Design,
    EffectAxis,
    Estimation,
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
        "Expected difference in means, treatment minus control.",
        "difference in means",
        unit="outcome units",
    ),
    Field(
        "sd",
        "assumptions",
        "number",
        "Common standard deviation of the outcome in both groups.",
        "standard deviation",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "sd_control",
        "assumptions",
        "number",
        "Standard deviation of the outcome in the control group.",
        "standard deviation in the control group",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "sd_treatment",
        "assumptions",
        "number",
        "Standard deviation of the outcome in the treatment group.",
        "standard deviation in the treatment group",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "baseline_correlation",
        "assumptions",
        "number",
        "Correlation between the baseline measurement and the outcome within a group (used by "
        "the ancova analysis).",
        "baseline–outcome correlation",
        minimum=-1,
        maximum=1,
        exclusive_minimum=True,
        exclusive_maximum=True,
    ),
)
FORMS = (("sd",), ("sd_control", "sd_treatment"))
MODEL_FIELDS = ("difference", "sd", "sd_control", "sd_treatment")
ANALYSES = (
    Analysis(
        "pooled_t",
        "Student's t test (pooled variance)",
        ("analytic", "simulation"),
        TESTING_AIMS,
        "Cohen 1988, ch. 2; power by the noncentral t",
    ),
    Analysis(
        "welch_t",
        "Welch's t test",
        ("analytic", "simulation"),
        TESTING_AIMS,
        "Welch 1947; Satterthwaite 1946; power by the noncentral t",
    ),
    Analysis(
        "rank_sum",
        "Wilcoxon-Mann-Whitney rank-sum test",
        ("analytic", "simulation"),
        ("superiority",),
        "Noether 1987, with P(Y > X) from the normal model",
    ),
    Analysis(
        "ancova",
        "Analysis of covariance on the baseline measurement",
        ("analytic", "simulation"),
        TESTING_AIMS,
        "Borm, Fransen & Lemmens 2007 (design factor 1 − ρ²); power by the noncentral t",
    ),
    Analysis(
        "pooled_t_interval",
        "t confidence interval for the difference in means (pooled variance)",
        ("analytic",),
        ("estimation",),
        "Kupper & Hafner 1989, Am Stat 43:101; half-width t·s·√(1/n₁ + 1/n₂), E[s] = c4·σ, "
        "P(s ≤ bound) by the chi-square distribution",
    ),
)

groups = two_groups
allocation = two_group_allocation
validate = make_validate(FIELDS, FORMS, "difference", MODEL_FIELDS)


def sds(q: dict) -> tuple[float, float]:
    """Return (sd_control, sd_treatment): the common sd twice, or the two posted SDs."""
    v = values(q, FIELDS)
    if v.get("sd") is not None or (v.get("sd_control") is None and v.get("sd_treatment") is None):
        sd = number(q, FIELDS, "sd")
        return sd, sd
    return number(q, FIELDS, "sd_control"), number(q, FIELDS, "sd_treatment")


def _unequal(q: dict) -> bool:
    v = values(q, FIELDS)
    return v.get("sd") is None and v.get("sd_control") != v.get("sd_treatment")


def default_analysis(q: dict) -> str:
    """Welch when the two SDs differ (as posted, or as a posted data model implies), else the
    pooled t test; the pooled t interval for a precision question."""
    if hypothesis(q)[0] == "estimation":
        return "pooled_t_interval"
    if _unequal(q):
        return "welch_t"
    data = (q.get("simulation") or {}).get("data") if q.get("method") == "simulation" else None
    if isinstance(data, dict) and isinstance(data.get("control"), dict):
        try:
            sds = [
                models.moments(models.check_arm(data[k], k))[1] for k in ("control", "treatment")
            ]
        except (QuestionError, KeyError):  # a malformed model is reported by the plan, on its path
            return "pooled_t"
        if None not in sds and abs(sds[0] - sds[1]) > 1e-12 * max(sds):
            return "welch_t"
    return "pooled_t"


def _analysis(q: dict) -> str:
    return analysis_of(q, DESIGN, "analytic")


def derive(q: dict) -> dict:
    """The group SDs a common sd stands for; P(Y > X) for the rank-sum analysis."""
    out: dict = {}
    v = values(q, FIELDS)
    if v.get("sd") is not None:
        out["sd_control"] = out["sd_treatment"] = float(v["sd"])
    if q.get("analysis") == "ancova" and v.get("baseline_correlation") is not None:
        out["design_factor"] = 1.0 - float(v["baseline_correlation"]) ** 2
    if q.get("analysis") == "rank_sum" and v.get("difference") is not None:
        sc, st = sds(q)
        out["prob_superiority"] = _p_sup(float(v["difference"]), sc, st)
    return out


def _p_sup(delta: float, sc: float, st: float) -> float:
    """P(Y > X) for normal groups: Φ(difference / √(sd_c² + sd_t²))."""
    return float(special.ndtr(delta / math.hypot(sc, st)))


def _se_df(welch: bool, s1: float, s2: float, n1: float, n2: float) -> tuple[float, float]:
    """Return the standard error of the difference and the t degrees of freedom."""
    v1, v2 = s1 * s1 / n1, s2 * s2 / n2
    se = math.sqrt(v1 + v2)
    if welch:
        df = (v1 + v2) ** 2 / (v1 * v1 / (n1 - 1.0) + v2 * v2 / (n2 - 1.0))
    else:
        df = n1 + n2 - 2.0
    return se, df


def tost_power(delta: float, se: float, margin: float, df: float, alpha: float) -> float:
    """Return the exact power of two one-sided t tests at ``alpha`` against bounds ±margin."""
    tc = float(stats.t.ppf(1.0 - alpha, df))
    # Conditional on the variance ratio v ~ chi2(df), both tests reject exactly when the observed
    # difference lies in (-margin + h, margin - h), h = tc·se·sqrt(v/df); integrate over v.
    v_max = df * (margin / (tc * se)) ** 2
    lo = float(stats.chi2.ppf(1e-15, df))
    hi = min(v_max, float(stats.chi2.isf(1e-15, df)))
    if hi <= lo:
        return 0.0

    def inside(v: float) -> float:
        h = tc * se * math.sqrt(v / df)
        p = stats.norm.cdf((margin - h - delta) / se) - stats.norm.cdf((-margin + h - delta) / se)
        return max(p, 0.0) * stats.chi2.pdf(v, df)

    mode = max(df - 2.0, lo)
    points = [mode] if lo < mode < hi else None
    value, _ = integrate.quad(inside, lo, hi, points=points, limit=200, epsabs=1e-12, epsrel=1e-10)
    return float(min(max(value, 0.0), 1.0))


def baseline_rho(q: dict) -> float:
    """The baseline–outcome correlation the ancova analysis needs."""
    return number(q, FIELDS, "baseline_correlation")


def ancova_se_df(q: dict, n1: float, n2: float) -> tuple[float, float]:
    """SE and df of the baseline-adjusted difference (Borm, Fransen & Lemmens 2007).

    The residual variance is σ²(1 − ρ²) (the design factor); the small-sample terms are the
    degree of freedom the slope uses (N − 3) and the slope's own sampling error with a random
    baseline, which inflates the variance by E[1 + (x̄₂ − x̄₁)²/Sxx·/(1/n₁ + 1/n₂)] = 1 + 1/(N − 4).
    The SDs are the outcome's, at baseline and after alike.
    """
    s1, s2 = sds(q)
    rho = baseline_rho(q)
    total = n1 + n2
    inflation = 1.0 + 1.0 / (total - 4.0) if total > 4.0 else math.inf
    var = (1.0 - rho * rho) * (s1 * s1 / n1 + s2 * s2 / n2) * inflation
    return math.sqrt(var), total - 3.0


def _power_at(q: dict, delta: float, n1: float, n2: float, alpha: float) -> float:
    """Return the power for true difference ``delta`` at n1 (control) and n2 (treatment)."""
    return _power_curve(q, alpha)(delta, n1, n2)


def _power_curve(q: dict, alpha: float) -> Callable[[float, float, float], float]:
    """The power at (delta, n1, n2) of the question's test at ``alpha``, its settings read once.

    The sample-size search evaluates the curve a dozen times; reading the analysis, SDs and
    hypothesis from the question each time cost as much as the noncentral t itself.
    """
    analysis = _analysis(q)
    s1, s2 = sds(q)
    sides = tails(q)
    aim, margin, higher = hypothesis(q)

    def at(delta: float, n1: float, n2: float) -> float:
        if analysis == "rank_sum":
            return noether.power_at(_p_sup(delta, s1, s2), n1, n2, alpha, sides)
        if analysis == "ancova":
            se, df = ancova_se_df(q, n1, n2)
            if not math.isfinite(se):
                return 0.0
        else:
            se, df = _se_df(analysis == "welch_t", s1, s2, n1, n2)
        if aim == "superiority":
            return t_power(abs(delta) / se, df, alpha, sides)
        if aim == "noninferiority":
            sign = 1.0 if higher else -1.0
            return t_power(sign * (delta - margin) / se, df, alpha, 1)
        return tost_power(delta, se, margin, df, alpha)

    return at


def _check_effect(q: dict, delta: float) -> None:
    """Refuse a difference that no sample size can turn into the target power."""
    aim, margin, higher = hypothesis(q)
    if aim == "superiority":
        if delta == 0:
            raise QuestionError(
                "effect.difference", "must differ from 0 for a superiority question; got 0"
            )
        return
    if margin is None:
        raise QuestionError("hypothesis.margin", f"is required for a {aim} question")
    if aim == "noninferiority":
        better = delta > margin if higher else delta < margin
        if not better:
            side = "above" if higher else "below"
            raise QuestionError(
                "effect.difference",
                f"{delta:g} must lie {side} the non-inferiority margin {margin:g}, "
                "or no sample size reaches the target power",
            )
    elif not abs(delta) < margin:
        raise QuestionError(
            "effect.difference",
            f"{delta:g} must lie strictly inside the equivalence bounds ±{margin:g}",
        )


def interval_precision(q: dict, per_group: list[float]) -> dict:
    """The pooled t interval for the difference in means at these sizes (a precision question)."""
    return precision.t_interval(q, number(q, FIELDS, "sd"), per_group)


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per group reaching the target power (root of the exact curve), or
    making the interval narrow enough for a precision question."""
    if _analysis(q) == "pooled_t_interval":
        return precision.t_interval_solution(q, number(q, FIELDS, "sd"), allocation(q))
    delta = number(q, FIELDS, "difference")
    _check_effect(q, delta)
    r = allocation(q)[1]
    target = float(q["target_power"])
    if _analysis(q) == "rank_sum":
        s1, s2 = sds(q)
        per_group, details = noether.solve(
            _p_sup(delta, s1, s2), allocation(q), alpha, tails(q), target
        )
        return Solution(per_group=per_group, details=details)
    at = _power_curve(q, alpha)
    n1 = solve_n_or_raise(
        lambda n: at(delta, n, r * n),
        target,
        max(2.5, 2.5 / r) if _analysis(q) == "ancova" else max(1.5, 1.5 / r),
        field="effect.difference",
        value=delta,
    )
    return Solution(per_group=[n1, r * n1])


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the power at the given (possibly fractional) n per group.

    A zero difference under superiority is answered: the power is then the size of the test.
    """
    delta = number(q, FIELDS, "difference")
    if not (delta == 0 and hypothesis(q)[0] == "superiority"):
        _check_effect(q, delta)
    return _power_at(q, delta, float(per_group[0]), float(per_group[1]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the smallest difference (largest, for equivalence) reaching the target power."""
    n1, n2 = float(per_group[0]), float(per_group[1])
    target = float(q["target_power"])
    aim, margin, higher = hypothesis(q)
    sign = 1.0 if higher else -1.0
    s1, s2 = sds(q)
    scale = math.sqrt(s1 * s1 / n1 + s2 * s2 / n2)
    if aim == "superiority":
        x = solve_effect_or_raise(
            lambda d: _power_at(q, d, n1, n2, alpha), target, per_group, hi=4 * scale
        )
        value = sign * x
    elif aim == "noninferiority":
        if margin is None:
            raise QuestionError("hypothesis.margin", "is required for a noninferiority question")
        x = solve_effect_or_raise(
            lambda d: _power_at(q, margin + sign * d, n1, n2, alpha),
            target,
            per_group,
            hi=4 * scale,
        )
        value = margin + sign * x
    else:
        if margin is None or not margin > 0:
            raise QuestionError(
                "hypothesis.margin", f"must be greater than 0 for equivalence; got {margin}"
            )
        # Power falls as the true difference moves from 0 to a bound: find where it crosses target.
        if _power_at(q, 0.0, n1, n2, alpha) < target:
            raise power_unreachable("sample_size.per_group", target, per_group)
        value = root(lambda d: _power_at(q, d, n1, n2, alpha) - target, 0.0, margin)
    return {"field": "difference", "value": float(value)}


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    """Warn when the pooled t test meets unequal SDs: its level is not kept there."""
    analysis = q.get("analysis") or default_analysis(q)
    if analysis != "pooled_t" or not _unequal(q):
        return []
    a = values(q, FIELDS)
    return [
        f"the pooled t test assumes equal SDs but the SDs differ ({a['sd_control']:g} vs "
        f"{a['sd_treatment']:g}): it does not hold its level there (its type I error grows well "
        "above alpha when the larger SD sits in the smaller group); use Welch's t test "
        "(analysis welch_t)."
    ]


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    analysis = _analysis(q)
    aim, margin, higher = hypothesis(q)
    label = DESIGN.analysis(analysis).label
    if analysis == "pooled_t_interval":
        return analytic_method(
            analysis,
            label,
            "t interval: expected half-width, or its probability by the chi-square distribution",
            "Kupper & Hafner (1989), Am Stat 43:101",
            [
                "Two-sided t interval for the difference in means (treatment − control) with the "
                "pooled SD: half-width t·s·√(1/n₁ + 1/n₂) on n₁ + n₂ − 2 degrees of freedom.",
                "Without an assurance the expected half-width (E[s] = c4·SD) is at most the "
                "target; with one, (n₁ + n₂ − 2)s²/SD² is chi-square and the half-width is at "
                "most the target with that probability.",
            ],
            derive(q),
        )
    if analysis == "rank_sum":
        block = noether.method_block(q, analysis, label)
        block["derived"] = derive(q)
        block["notes"].append(
            "P(Y > X) = Φ(difference / √(σ₁² + σ₂²)) for normal outcomes (σ₁, σ₂ the group SDs)."
        )
        return block
    notes = []
    if analysis == "ancova":
        notes.append(
            f"Adjusted for the baseline measurement (correlation ρ = {baseline_rho(q):g}): the "
            "residual variance is σ²(1 − ρ²), with N − 3 degrees of freedom and the variance "
            "inflation 1 + 1/(N − 4) of a slope estimated from a random baseline."
        )
    if analysis == "ancova":
        name = "noncentral t, baseline-adjusted (design factor 1 − ρ², N − 3 df)"
        ref = "Borm, Fransen & Lemmens (2007), J Clin Epidemiol 60:1234"
    elif analysis == "welch_t":
        name = "noncentral t with Satterthwaite degrees of freedom"
        ref = "Welch (1947), Biometrika 34:28; Satterthwaite (1946)"
    else:
        name = "noncentral t, pooled variance"
        ref = "Cohen (1988), ch. 2"
        if _unequal(q):
            # Say what was computed: the pooled label would be wrong here.
            name = "noncentral t with unequal SDs: unpooled standard error, n1 + n2 − 2 df"
            notes.append(
                "The SDs differ; the pooled t test's power uses their unpooled standard error "
                "with n1 + n2 − 2 degrees of freedom. Welch's t test is the safer choice."
            )
    if aim == "noninferiority":
        name = f"one-sided {name}, against the margin"
        ref = f"Chow, Shao & Wang (2008), ch. 3; {ref}"
        notes.append(
            f"H0: the difference is {'at or below' if higher else 'at or above'} the "
            f"margin {margin:g}; noncentrality (difference − margin)/SE."
        )
    elif aim == "equivalence":
        name = f"two one-sided tests (TOST), exact power over the variance estimate; {name}"
        ref = f"Schuirmann (1987), J Pharmacokinet Biopharm 15:657; Owen (1965); {ref}"
        notes.append(
            f"Equivalence bounds ±{margin:g}; power integrates both tests jointly "
            "over the chi-square distribution of the variance estimate."
        )
        if analysis == "welch_t":
            notes.append(
                "With unequal SDs the variance estimate is taken as chi-square with "
                "Satterthwaite degrees of freedom (an approximation)."
            )
    else:
        notes.append(
            "Power counts both rejection tails for a two-sided test; a one-sided test "
            "looks in the direction of the assumed difference."
        )
    notes.append("The n per group is solved on the continuous power curve, then rounded up.")
    return analytic_method(analysis, label, name, ref, notes, derive(q))


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Normal groups: control mean 0, treatment mean = the difference, each with its SD."""
    sc, st = sds(q)
    return [
        {"family": "normal", "mean": 0.0, "sd": sc},
        {"family": "normal", "mean": number(q, FIELDS, "difference"), "sd": st},
    ]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    """Treatment shifted onto the null boundary (the control mean, or control + margin)."""
    aim, margin = rule.aim, rule.margin
    target = models.center(arms[0]) + (margin if aim != "superiority" else 0.0)
    null = [arms[0], models.shifted(arms[1], target - models.center(arms[1]))]
    if aim == "superiority":
        text = "treatment shifted to the control mean (difference 0), shape unchanged"
    elif aim == "noninferiority":
        text = (
            f"treatment shifted so the difference equals the margin ({margin:g}), the null boundary"
        )
    else:
        text = f"treatment shifted so the difference equals the upper margin (+{margin:g}), a null boundary"
    return null, text


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """The difference moves away from 0 (or from the margin) in the rule's direction."""
    if rule.aim == "superiority":
        return EffectAxis(0.0, rule.direction, math.inf)
    if rule.aim == "noninferiority":
        return EffectAxis(rule.margin, rule.direction, math.inf)
    return EffectAxis(rule.margin, -1, rule.margin, inclusive=True)


def implied_contrast(arms: list[dict]) -> float | None:
    """Treatment minus control mean (location when the mean does not exist)."""
    return models.center(arms[1]) - models.center(arms[0])


def implied_fields(q: dict, arms: list[dict]) -> dict:
    """The difference and SDs the two groups' data models imply."""
    (m1, v1), (m2, v2) = (models.moments(a) for a in arms)
    fields: dict = {}
    missing: list[str] = []
    if m1 is not None and m2 is not None:
        fields["difference"] = m2 - m1
    else:
        missing.append("difference")
    checks: dict = {}
    common = (q.get("assumptions") or {}).get("sd") is not None
    if v1 is None or v2 is None:  # no finite SD: name the SD fields in the form posted
        missing += ["sd"] if common else ["sd_control", "sd_treatment"]
    elif abs(v1 - v2) <= 1e-12 * max(v1, v2):
        fields["sd"] = math.sqrt(v1)
    else:
        fields["sd_control"], fields["sd_treatment"] = math.sqrt(v1), math.sqrt(v2)
        checks = {"sd": ["sd_control", "sd_treatment"]}  # a posted common SD must fit both
    return {"fields": fields, "missing": missing, "replaces": checks}


def planned_moments(q: dict) -> tuple[float, float, float, float]:
    """(control mean, difference, sd_control, sd_treatment) the robustness panel departs from."""
    difference = number(q, FIELDS, "difference")
    sc, st = sds(q)
    data = (q.get("simulation") or {}).get("data")
    # The control mean only positions the skewed families; a posted normal model supplies it.
    mean0 = 0.0
    if isinstance(data, dict) and (data.get("control") or {}).get("family") == "normal":
        mean0 = float(data["control"]["mean"])
    return mean0, difference, sc, st


def check_models(q: dict, arms: list[dict], labels: list[str]) -> None:
    """The ancova simulation draws a normal baseline and outcome; other families are refused."""
    if q.get("analysis") != "ancova":
        return
    for arm, label in zip(arms, labels, strict=True):
        if arm["family"] != "normal":
            raise QuestionError(
                f"simulation.data.{label}.family",
                f"the ancova analysis is simulated with normal outcomes; got {arm['family']!r}",
            )


SIMULATION = SimulationModel(
    data_keys=("control", "treatment"),
    default_data=default_data,
    null_data=null_data,
    kernels={
        "pooled_t": "t_pooled",
        "welch_t": "t_welch",
        "rank_sum": "rank_sum",
        "ancova": "ancova",
    },
    settings=lambda q: (
        {"baseline_correlation": baseline_rho(q)} if (q.get("analysis") or "") == "ancova" else {}
    ),
    check_models=check_models,
    effect_axis=effect_axis,
    implied_contrast=implied_contrast,
    implied_fields=implied_fields,
    approximate_n=None,  # the machinery's moment-based approximation applies
    planned_moments=planned_moments,
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "difference")
    if value is None:
        return "the difference in means, treatment minus control"
    return f"a difference in means of {fmt(value)} (treatment minus control)"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    rho = v.get("baseline_correlation")
    tail = f" and a baseline–outcome correlation of {fmt(rho)}" if rho is not None else ""
    if v.get("sd") is not None:
        return f"a standard deviation of {fmt(v['sd'])} in both groups{tail}"
    if v.get("sd_control") is None:
        return ""
    return (
        f"a standard deviation of {fmt(v['sd_control'])} in the control group and "
        f"{fmt(v['sd_treatment'])} in the treatment group{tail}"
    )


def _cluster_scale(q: dict) -> tuple[float, float, float]:
    sc, st = sds(q)
    return number(q, FIELDS, "difference"), sc * sc, st * st


CLUSTER = ClusterSupport(
    scale=_cluster_scale,
    effect_top=lambda q, sign: 100.0 * max(sds(q)),
    family="normal",
    analyses=("pooled_t", "welch_t"),
)


DESIGN = Design(
    outcome="continuous",
    layout="two_groups",
    label="Continuous outcome, two groups",
    fields=FIELDS,
    forms=FORMS,
    solved="difference",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=default_analysis,
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
        estimand=lambda q: (
            "the difference in means (treatment minus control), assuming " + assumptions_sentence(q)
        ),
    ),
    example="northbridge_bp_trial.json",
    sequential=True,
    contrast=lambda q: values(q, FIELDS).get("difference"),
    null_effect=lambda q: 0.0,
    cluster=CLUSTER,
    estimation=Estimation(forms=(("sd",),), precision=interval_precision, assurance=True),
)
