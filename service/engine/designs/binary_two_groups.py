"""Binary outcome, two groups: pooled and unpooled z, Fleiss continuity correction, arcsine (h),
the Farrington-Manning score test against a margin, and Fisher's exact test by simulation."""

from __future__ import annotations

import math

from scipy import stats

from .. import models, precision
from ..errors import QuestionError
from ..quantiles import normal_power, power_unreachable, root, z, z_alpha
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
        "Expected proportion with the outcome event in the treatment group.",
        "event proportion in the treatment group",
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
    Field(
        "continuity_correction",
        "analysis_options",
        "boolean",
        "Apply Fleiss' continuity correction (pooled z test, superiority only).",
        "continuity correction",
        default=False,
    ),
)
FORMS = (("p_control",),)
MARGIN_AIMS = ("noninferiority", "equivalence")
ANALYSES = (
    Analysis(
        "pooled_z",
        "z test with pooled variance",
        ("analytic", "simulation"),
        ("superiority",),
        "Fleiss, Levin & Paik 2003, ch. 4",
    ),
    Analysis(
        "unpooled_z",
        "z test with unpooled variance (Wald)",
        ("analytic", "simulation"),
        TESTING_AIMS,
        "Chow, Shao & Wang 2008, ch. 4",
    ),
    Analysis(
        "arcsine",
        "arcsine-transformed z test (Cohen's h)",
        ("analytic",),
        ("superiority",),
        "Cohen 1988, ch. 6",
    ),
    Analysis(
        "score",
        "Farrington-Manning score test",
        ("analytic",),
        MARGIN_AIMS,
        "Farrington & Manning 1990; Miettinen & Nurminen 1985",
    ),
    Analysis(
        "fisher_exact",
        "Fisher's exact test",
        ("simulation",),
        ("superiority",),
        "Fisher 1935; power by simulation",
    ),
    Analysis(
        "newcombe_interval",
        "Newcombe hybrid score interval for the difference in proportions",
        ("analytic",),
        ("estimation",),
        "Newcombe 1998, Stat Med 17:873 (method 10), from Wilson 1927 score intervals",
    ),
)
_EDGE = 1e-9

groups = two_groups
allocation = two_group_allocation


validate = make_validate(FIELDS, FORMS, "p_treatment", ("p_control", "p_treatment"))


def default_analysis(q: dict) -> str:
    """pooled_z for superiority; against a margin the score test (its Wald form when simulated,
    as the score test is not simulated); Newcombe's interval for a precision question."""
    if hypothesis(q)[0] == "estimation":
        return "newcombe_interval"
    if hypothesis(q)[0] == "superiority":
        return "pooled_z"
    return "unpooled_z" if q.get("method") == "simulation" else "score"


def _prob(q: dict, name: str) -> float:
    return number(q, FIELDS, name)


def _setup(q: dict) -> tuple[str, str, float | None, bool, bool]:
    """Return (analysis, aim, margin, higher_is_better, continuity) after checking they combine."""
    analysis = analysis_of(q, DESIGN, "analytic")
    aim, margin, higher = hypothesis(q)
    cc = bool(values(q, FIELDS).get("continuity_correction"))
    if aim != "superiority" and margin is None:
        raise QuestionError("hypothesis.margin", f"is required for a {aim} question")
    if cc and (analysis != "pooled_z" or aim != "superiority"):
        raise QuestionError(
            "analysis_options.continuity_correction",
            "the continuity correction is offered only with analysis pooled_z for superiority",
        )
    return analysis, aim, margin, higher, cc


def derive(q: dict) -> dict:
    """Nothing is derived from what was posted."""
    return {}


def _var1(p1: float, p2: float, n1: float, n2: float) -> float:
    """Return the unpooled variance of p̂2 − p̂1."""
    return p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2


def restricted_mle(p1: float, p2: float, r: float, margin: float) -> tuple[float, float]:
    """Return (p̃1, p̃2), the MLE of (control, treatment) under p̃2 − p̃1 = margin.

    Closed-form root of the likelihood cubic (Miettinen & Nurminen 1985; Farrington & Manning
    1990), evaluated at the expected proportions p1, p2 with n2 = r·n1.
    """
    if margin == 0:
        pooled = (p1 + r * p2) / (1 + r)
        return pooled, pooled
    # Parameterised on the treatment arm (a, weight r) against the control arm (b, weight 1).
    theta = 1.0 / r  # n_control / n_treatment
    a = 1.0 + theta
    b = -(1.0 + theta + p2 + theta * p1 + margin * (theta + 2.0))
    c = margin * margin + margin * (2.0 * p2 + theta + 1.0) + p2 + theta * p1
    d = -p2 * margin * (1.0 + margin)
    v = b**3 / (3.0 * a) ** 3 - b * c / (6.0 * a * a) + d / (2.0 * a)
    u = math.copysign(math.sqrt(max(b * b / (3.0 * a) ** 2 - c / (3.0 * a), 0.0)), v)
    w = (math.pi + math.acos(max(-1.0, min(1.0, v / u**3 if u else 0.0)))) / 3.0
    pt = 2.0 * u * math.cos(w) - b / (3.0 * a)
    pc = pt - margin
    return min(max(pc, 0.0), 1.0), min(max(pt, 0.0), 1.0)


def _fm_power(p1: float, p2: float, n1: float, n2: float, bound: float, upper: bool, z_a: float):
    """Power of one Farrington-Manning score test of H0: p2 − p1 = bound.

    ``upper`` true rejects for a difference above the bound. The statistic's null SD comes from
    the restricted MLE, its SD under the truth from p1 and p2.
    """
    q1, q2 = restricted_mle(p1, p2, n2 / n1, bound)
    sd0 = math.sqrt(q1 * (1 - q1) / n1 + q2 * (1 - q2) / n2)
    sd1 = math.sqrt(_var1(p1, p2, n1, n2))
    gap = (p2 - p1 - bound) if upper else (bound - (p2 - p1))
    return float(stats.norm.cdf((gap - z_a * sd0) / sd1))


def _power_at(q: dict, p1: float, p2: float, n1: float, n2: float, alpha: float) -> float:
    """Return the power for true proportions p1 (control) and p2 (treatment) at n1 and n2."""
    analysis, aim, margin, higher, cc = _setup(q)
    count = tails(q)
    if aim == "superiority":
        z_a = z_alpha(alpha, count)
        if analysis == "arcsine":
            h = 2 * math.asin(math.sqrt(p2)) - 2 * math.asin(math.sqrt(p1))
            return normal_power(h / math.sqrt(1 / n1 + 1 / n2), z_a, count)
        diff = abs(p2 - p1)
        sd1 = math.sqrt(_var1(p1, p2, n1, n2))
        if analysis == "unpooled_z":
            return normal_power(diff / sd1, z_a, count)
        pbar = (n1 * p1 + n2 * p2) / (n1 + n2)
        sd0 = math.sqrt(pbar * (1 - pbar) * (1 / n1 + 1 / n2))
        # Fleiss' correction shrinks the observed difference by (1/n1 + 1/n2)/2.
        k = (1 / n1 + 1 / n2) / 2 if cc else 0.0
        power = stats.norm.cdf((diff - k - z_a * sd0) / sd1)
        if count == 2:
            power += stats.norm.cdf((-diff - k - z_a * sd0) / sd1)
        return float(min(power, 1.0))
    z_a = z(1 - alpha)
    if analysis == "score":
        if aim == "noninferiority":
            return _fm_power(p1, p2, n1, n2, margin, higher, z_a)
        both = (
            _fm_power(p1, p2, n1, n2, -margin, True, z_a)
            + _fm_power(p1, p2, n1, n2, margin, False, z_a)
            - 1
        )
        return float(max(both, 0.0))
    sd1 = math.sqrt(_var1(p1, p2, n1, n2))
    diff = p2 - p1
    if aim == "noninferiority":
        sign = 1.0 if higher else -1.0
        return float(stats.norm.cdf(sign * (diff - margin) / sd1 - z_a))
    power = (
        stats.norm.cdf((margin - diff) / sd1 - z_a)
        + stats.norm.cdf((margin + diff) / sd1 - z_a)
        - 1
    )
    return float(max(power, 0.0))


def _check_effect(q: dict, p1: float, p2: float) -> None:
    """Refuse proportions that no sample size can turn into the target power."""
    _, aim, margin, higher, _ = _setup(q)
    diff = p2 - p1
    if aim == "superiority" and diff == 0:
        raise QuestionError(
            "effect.p_treatment", f"must differ from p_control ({p1:g}) for a superiority question"
        )
    if aim == "noninferiority" and not (diff > margin if higher else diff < margin):
        side = "above" if higher else "below"
        raise QuestionError(
            "effect.p_treatment",
            f"{p2:g} gives a difference {diff:g} that must lie {side} the margin {margin:g}",
        )
    if aim == "equivalence" and not abs(diff) < margin:
        raise QuestionError(
            "effect.p_treatment",
            f"{p2:g} gives a difference {diff:g} outside the equivalence bounds ±{margin:g}",
        )


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per group from the closed-form formula (root finding for equivalence)."""
    if hypothesis(q)[0] == "estimation":
        return _interval_solution(q)
    analysis, aim, margin, higher, cc = _setup(q)
    p1, p2 = _prob(q, "p_control"), _prob(q, "p_treatment")
    _check_effect(q, p1, p2)
    r = allocation(q)[1]
    count = tails(q)
    z_b = z(float(q["target_power"]))
    details: dict = {}
    if aim == "superiority":
        z_a = z_alpha(alpha, count)
        if analysis == "arcsine":
            h = 2 * math.asin(math.sqrt(p2)) - 2 * math.asin(math.sqrt(p1))
            n1 = (1 + 1 / r) * ((z_a + z_b) / h) ** 2
            details["cohens_h"] = h
        elif analysis == "unpooled_z":
            n1 = (z_a + z_b) ** 2 * (p1 * (1 - p1) + p2 * (1 - p2) / r) / (p2 - p1) ** 2
        else:
            pbar = (p1 + r * p2) / (1 + r)
            a = z_a * math.sqrt(pbar * (1 - pbar) * (1 + 1 / r))
            b = z_b * math.sqrt(p1 * (1 - p1) + p2 * (1 - p2) / r)
            n1 = ((a + b) / (p2 - p1)) ** 2
            if cc:
                details["uncorrected_per_group"] = [n1, r * n1]
                c = 2 * (r + 1) / (r * n1 * abs(p2 - p1))
                n1 = n1 / 4 * (1 + math.sqrt(1 + c)) ** 2
    elif aim == "noninferiority" and analysis == "score":
        # Farrington & Manning (1990): n1 = [z_a·√V0 + z_b·√V1]² / (p2 − p1 − margin)², V0 from
        # the restricted MLE under the margin, V1 from the assumed proportions (per control unit).
        z_a = z(1 - alpha)
        q1, q2 = restricted_mle(p1, p2, r, margin)
        v0 = q1 * (1 - q1) + q2 * (1 - q2) / r
        v1 = p1 * (1 - p1) + p2 * (1 - p2) / r
        n1 = (z_a * math.sqrt(v0) + z_b * math.sqrt(v1)) ** 2 / (p2 - p1 - margin) ** 2
        details["restricted_mle"] = {"p_control": q1, "p_treatment": q2}
    elif aim == "noninferiority":
        z_a = z(1 - alpha)
        n1 = (z_a + z_b) ** 2 * (p1 * (1 - p1) + p2 * (1 - p2) / r) / (p2 - p1 - margin) ** 2
    else:
        # Both one-sided tests must reject; no closed form away from p2 = p1, so solve the curve.
        target = float(q["target_power"])
        f = lambda n: _power_at(q, p1, p2, n, r * n, alpha) - target  # noqa: E731
        hi = 16.0
        while f(hi) < 0:
            hi *= 4
            if hi > 1e12:
                raise QuestionError(
                    "effect.p_treatment", "the difference is too close to the bounds to plan for"
                )
        n1 = root(f, 1e-6, hi)
    return Solution(per_group=[n1, r * n1], details=details)


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the normal-approximation power at the given (possibly fractional) n per group."""
    p1, p2 = _prob(q, "p_control"), _prob(q, "p_treatment")
    _setup(q)
    return _power_at(q, p1, p2, float(per_group[0]), float(per_group[1]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the treatment proportion nearest p_control (in the better direction) reaching target power."""
    _, aim, margin, higher, _ = _setup(q)
    p1 = _prob(q, "p_control")
    n1, n2 = float(per_group[0]), float(per_group[1])
    target = float(q["target_power"])
    sign = 1.0 if higher else -1.0
    end = 1.0 - _EDGE if higher else _EDGE

    def f(p2: float) -> float:
        return _power_at(q, p1, p2, n1, n2, alpha) - target

    if aim == "equivalence":
        start = p1
        end = min(max(p1 + sign * margin, _EDGE), 1.0 - _EDGE)
        if f(start) < 0:
            raise power_unreachable("sample_size.per_group", target, per_group)
        if f(end) >= 0:
            return {"field": "p_treatment", "value": float(end)}
        return {"field": "p_treatment", "value": root(f, start, end)}
    start = p1 if aim == "superiority" else p1 + margin
    start = min(max(start, _EDGE), 1.0 - _EDGE)
    if f(start) >= 0:
        return {"field": "p_treatment", "value": float(start)}
    if f(end) < 0:
        raise power_unreachable("sample_size.per_group", target, per_group)
    return {"field": "p_treatment", "value": root(f, start, end)}


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    """Return plain-language warnings when the normal approximation is strained (n·p < 5)."""
    if hypothesis(q)[0] == "estimation":
        return []  # Newcombe's interval is built from score intervals, not the z test
    out = []
    v = values(q, FIELDS)
    for group, name, n in zip(
        ("control", "treatment"), ("p_control", "p_treatment"), per_group, strict=False
    ):
        p = v.get(name)
        if p is None:
            continue
        expected = min(float(n) * p, float(n) * (1 - p))
        if expected < 5:
            out.append(
                f"The expected count in the {group} group is {expected:.1f} (below 5): the normal "
                "approximation is rough here; a simulated Fisher's exact test is safer."
            )
    return out


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    if hypothesis(q)[0] == "estimation":
        return _interval_method(q)
    analysis, aim, margin, higher, cc = _setup(q)
    label = DESIGN.analysis(analysis).label

    def block(approximation: str, reference: str, notes: list[str]) -> dict:
        return analytic_method(analysis, label, approximation, reference, notes, {})

    if aim != "superiority":
        what = "non-inferiority" if aim == "noninferiority" else "equivalence (two one-sided tests)"
        notes = [
            f"One-sided tests at alpha against the margin {margin:g} on the difference of the "
            "treatment and control proportions."
        ]
        if analysis == "score":
            notes.append(
                "Score test: the variance under H0 uses the maximum-likelihood proportions "
                "restricted to a difference equal to the margin; under the alternative, the "
                "assumed proportions."
            )
            return block(
                f"normal approximation with restricted-MLE variance, {what}",
                "Farrington & Manning (1990), Stat Med 9:1447; Miettinen & Nurminen (1985)",
                notes,
            )
        notes.append("Wald test: the variance under both hypotheses is the unpooled one.")
        return block(
            f"normal approximation, unpooled variance, {what}",
            "Chow, Shao & Wang (2008), ch. 4",
            notes,
        )
    if analysis == "arcsine":
        return block(
            "normal approximation on the arcsine scale",
            "Cohen (1988), ch. 6",
            ["h = 2·asin√p₂ − 2·asin√p₁ (treatment, control); Var(2·asin√p̂) ≈ 1/n."],
        )
    if analysis == "unpooled_z":
        return block(
            "normal approximation, unpooled variance",
            "Chow, Shao & Wang (2008), ch. 4",
            ["The variance under both hypotheses is p1(1 − p1)/n1 + p2(1 − p2)/n2."],
        )
    notes = ["Pooled variance under H0, unpooled under the alternative."]
    if cc:
        notes.append(
            "Fleiss continuity correction: n = n′/4·(1 + √(1 + 2(r + 1)/(r·n′·|Δ|)))², "
            "which is n′/4·(1 + √(1 + 4/(n′·|Δ|)))² for equal groups."
        )
    return block(
        "normal approximation, pooled variance" + (", continuity corrected" if cc else ""),
        "Fleiss, Levin & Paik (2003), ch. 4",
        notes,
    )


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Bernoulli groups at the two proportions."""
    return [
        {"family": "bernoulli", "p": _prob(q, "p_control")},
        {"family": "bernoulli", "p": _prob(q, "p_treatment")},
    ]


def check_models(q: dict, arms: list[dict], labels: list[str]) -> None:
    """A binary outcome is simulated with bernoulli groups only."""
    for a, lab in zip(arms, labels, strict=True):
        if a["family"] != "bernoulli":
            raise QuestionError(
                f"simulation.data.{lab}.family",
                f"a binary outcome needs bernoulli groups; got {a['family']!r}",
            )


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    """Treatment p set to the control's (plus the margin against a margin): the null boundary."""
    margin = rule.margin if rule.aim != "superiority" else 0.0
    p0 = arms[0]["p"] + margin
    if not 0 <= p0 <= 1:
        raise QuestionError(
            "hypothesis.margin",
            f"control p + margin = {p0:g} is not a probability; the null cannot be simulated",
        )
    how = (
        "treatment p set to control's"
        if rule.aim == "superiority"
        else "treatment p set to control's plus the margin"
    )
    return [arms[0], {"family": "bernoulli", "p": p0}], f"{how} ({p0:g}); the null boundary"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """p_treatment moves from p_control (or the margin's edge) in the rule's direction."""
    p1 = _prob(q, "p_control")
    sign, margin = rule.direction, rule.margin
    if rule.aim == "equivalence":
        edge = min(max(p1 + sign * margin, 0.0), 1.0)
        return EffectAxis(edge, -sign, abs(edge - p1), inclusive=True)
    origin = p1 if rule.aim == "superiority" else p1 + margin
    room = 1.0 - origin if sign > 0 else origin
    return EffectAxis(origin, sign, room)


def settings(q: dict) -> dict:
    return {"continuity_correction": bool(values(q, FIELDS).get("continuity_correction"))}


def approximate_n(plan, target: float) -> float | None:
    from ..approximate import proportions_first

    return proportions_first(plan, target)


def implied_fields(q: dict, arms: list[dict]) -> dict:
    if all(a["family"] == "bernoulli" for a in arms):
        return {"fields": {"p_control": arms[0]["p"], "p_treatment": arms[1]["p"]}}
    return {"fields": {}}


SIMULATION = SimulationModel(
    data_keys=("control", "treatment"),
    default_data=default_data,
    null_data=null_data,
    kernels={"pooled_z": "z_pooled", "unpooled_z": "z_unpooled", "fisher_exact": "fisher_exact"},
    effect_axis=effect_axis,
    check_models=check_models,
    settings=settings,
    implied_contrast=lambda arms: models.center(arms[1]) - models.center(arms[0]),
    implied_fields=implied_fields,
    approximate_n=approximate_n,
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "p_treatment")
    if value is None:
        return "the event proportion in the treatment group"
    return f"an event proportion of {fmt(value)} in the treatment group"


def assumptions_sentence(q: dict) -> str:
    p = values(q, FIELDS).get("p_control")
    return "" if p is None else f"an event proportion of {fmt(p)} in the control group"


# --- precision questions: Newcombe's interval for p_treatment − p_control ----------------------


def _interval_precision(q: dict, per_group: list[float]) -> dict:
    """The interval's half-width when the observed proportions equal the planned ones."""
    hyp = q["hypothesis"]
    p1, p2 = _prob(q, "p_control"), _prob(q, "p_treatment")
    return {
        "half_width_expected": precision.newcombe_half_width(p1, p2, per_group, hyp["confidence"]),
        "half_width_assured": None,
        "probability": None,
        "basis": "when the observed proportions equal the planned ones (counts n·p, not rounded)",
    }


def _interval_solution(q: dict) -> Solution:
    analysis_of(q, DESIGN, "analytic")
    share = allocation(q)
    n = precision.solve_size(
        lambda n: _interval_precision(q, [n * a for a in share])["half_width_expected"],
        q["hypothesis"]["half_width"],
        floor=max(2.0 / a for a in share),
    )
    return Solution(per_group=[n * a for a in share])


def _interval_method(q: dict) -> dict:
    analysis = analysis_of(q, DESIGN, "analytic")
    return analytic_method(
        analysis,
        DESIGN.analysis(analysis).label,
        "hybrid score interval at the planned proportions",
        "Newcombe (1998), Stat Med 17:873, method 10; Wilson (1927), JASA 22:209",
        [
            "Two-sided interval for p_treatment − p_control: its limits combine each group's "
            "Wilson score limits (Newcombe's method 10).",
            "The half-width is the one the interval has when the observed proportions equal "
            "the planned ones (counts n·p, not rounded).",
        ],
        {},
    )


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    if v.get("p_treatment") is None or v.get("p_control") is None:
        return None
    return float(v["p_treatment"]) - float(v["p_control"])


def _cluster_scale(q: dict) -> tuple[float, float, float]:
    p1, p2 = _prob(q, "p_control"), _prob(q, "p_treatment")
    return p2 - p1, p1 * (1 - p1), p2 * (1 - p2)


def _cluster_top(q: dict, sign: float) -> float:
    p1 = _prob(q, "p_control")
    return (1.0 - p1 if sign > 0 else p1) - 1e-9


CLUSTER = ClusterSupport(
    scale=_cluster_scale,
    effect_top=_cluster_top,
    family="bernoulli",
    analyses=("pooled_z", "unpooled_z"),
    note="Binary outcome with clusters: the variance per person is p(1 − p) in each group "
    "(unpooled), as the cluster-level t test estimates it from the spread of cluster "
    "proportions; the analysis setting of the individual-level test does not apply.",
)


DESIGN = Design(
    outcome="binary",
    layout="two_groups",
    label="Binary outcome, two groups",
    fields=FIELDS,
    forms=FORMS,
    solved="p_treatment",
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
            "the difference in event proportions (treatment minus control), "
            f"planned at {fmt(_prob(q, 'p_treatment'))} in the treatment group and "
            f"{fmt(_prob(q, 'p_control'))} in the control group"
        ),
    ),
    example="northbridge_wound_infection.json",
    sequential=True,
    contrast=_contrast,
    null_effect=lambda q: values(q, FIELDS).get("p_control"),
    cluster=CLUSTER,
    estimation=Estimation(
        forms=(("p_control", "p_treatment"),),
        precision=_interval_precision,
        expected_words="when the observed proportions equal the planned ones",
    ),
)
