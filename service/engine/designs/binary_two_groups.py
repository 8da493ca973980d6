"""Binary outcome, two groups: pooled and unpooled z, Fleiss continuity correction, arcsine (h),
the Farrington-Manning and Miettinen-Nurminen score tests against a margin on the difference,
risk-ratio or odds-ratio scale (Miettinen-Nurminen also with its power by exact enumeration, and
as an exact unconditional test), and Fisher's exact test by simulation.

On a ratio scale (``analysis_options.scale``) the effect is still stated by ``p_treatment`` and
``p_control`` (the ratio is implied by them) and ``hypothesis.margin`` is the natural log of the
ratio limit, as in the other ratio cells: ln 0.8 = −0.2231 is a non-inferiority limit of 0.8 on
the risk ratio when higher is better; ln 1.25 = 0.2231 makes equivalence limits 0.80–1.25.
"""

from __future__ import annotations

import math

from scipy import stats

from .. import models, precision
from ..errors import QuestionError
from ..quantiles import normal_power, power_unreachable, root, z, z_alpha
from . import binary_scales
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
    bernoulli_only,
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
    Field(
        "scale",
        "analysis_options",
        "choice",
        "Scale of the contrast tested against the margin: difference (when left out), "
        "risk_ratio or odds_ratio (treatment over control); on a ratio scale hypothesis.margin "
        "is the natural log of the limit.",
        "contrast scale",
        choices=binary_scales.SCALES,
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
        "mn_score",
        "Miettinen-Nurminen score test",
        ("analytic", "simulation"),
        MARGIN_AIMS,
        "Miettinen & Nurminen 1985, Stat Med 4:213",
    ),
    Analysis(
        "mn_score_enumerated",
        "Miettinen-Nurminen score test, power by exact enumeration",
        ("analytic",),
        MARGIN_AIMS,
        "Miettinen & Nurminen 1985; the asymptotic test's exact power by enumeration",
        size_search="the smallest whole control-group size whose power, enumerated over every "
        "possible outcome, reaches the target (the treatment group at the allocation ratio, "
        "rounded up)",
    ),
    Analysis(
        "mn_score_unconditional",
        "exact unconditional Miettinen-Nurminen score test",
        ("analytic",),
        MARGIN_AIMS,
        "Suissa & Shuster 1985; Chan 1998; power by enumeration",
        size_search="the smallest whole control-group size whose power, enumerated over every "
        "possible outcome, reaches the target (the treatment group at the allocation ratio, "
        "rounded up)",
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
# the analyses that test on any scale (the others test a difference of proportions)
SCORE_ANALYSES = ("score", "mn_score", "mn_score_enumerated", "mn_score_unconditional")
ENUMERATED = ("mn_score_enumerated", "mn_score_unconditional")

groups = two_groups
allocation = two_group_allocation


validate = make_validate(FIELDS, FORMS, "p_treatment", ("p_control", "p_treatment"))


def default_analysis(q: dict) -> str:
    """pooled_z for superiority; against a margin the Farrington-Manning score test (simulated:
    the Wald test on the difference, the Miettinen-Nurminen score test on a ratio scale);
    Newcombe's interval for a precision question."""
    if hypothesis(q)[0] == "estimation":
        return "newcombe_interval"
    if hypothesis(q)[0] == "superiority":
        return "pooled_z"
    if q.get("method") == "simulation":
        return "unpooled_z" if _scale_value(q) == "difference" else "mn_score"
    return "score"


def _scale_value(q: dict) -> str:
    return str(values(q, FIELDS).get("scale") or "difference")


def _scale(q: dict, analysis: str, aim: str) -> str:
    """Return the contrast scale, refusing one the analysis or the aim cannot use."""
    scale = _scale_value(q)
    if scale not in binary_scales.SCALES:
        raise QuestionError(
            "analysis_options.scale",
            f"must be one of {', '.join(binary_scales.SCALES)}; got {scale!r}",
        )
    if scale != "difference" and aim == "superiority":
        raise QuestionError(
            "analysis_options.scale",
            f"{scale} applies to noninferiority and equivalence questions (a margin on that "
            "scale); a superiority test of no difference is the same on every scale, remove it",
        )
    if scale != "difference" and analysis not in SCORE_ANALYSES:
        raise QuestionError(
            "analysis_options.scale",
            f"{scale} is tested by the analyses {', '.join(SCORE_ANALYSES)}; got analysis "
            f"{analysis!r}, which tests a difference of proportions",
        )
    return scale


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
    _scale(q, analysis, aim)
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
    q1, q2 = binary_scales.restricted_mle(p1, p2, 1.0, r, "difference", margin)
    return float(q1), float(q2)


def _score_power(q: dict, p1: float, p2: float, n1: float, n2: float, alpha: float) -> float:
    """Power of the score test(s) against the margin on the question's scale.

    Normal approximation for ``score`` (Farrington-Manning) and ``mn_score`` (Miettinen-Nurminen,
    null variance times N/(N − 1)); for ``mn_score_enumerated`` the exact power of the
    Miettinen-Nurminen test, summed over every outcome at whole group sizes.
    """
    analysis, aim, margin, higher, _ = _setup(q)
    scale = _scale_value(q)
    if analysis in ENUMERATED:
        m1, m2 = _whole(n1, analysis), _whole(n2, analysis)
        exact = analysis == "mn_score_unconditional"
        grid = binary_scales.cached_reject_grid(
            exact, m1, m2, scale, aim, float(margin), bool(higher), float(alpha)
        )
        return binary_scales.enumerated_power(grid, p1, p2)
    z_a = z(1 - alpha)
    mn = analysis == "mn_score"
    one = binary_scales.one_sided_power
    if aim == "noninferiority":
        return one(p1, p2, n1, n2, scale, margin, higher, z_a, mn)
    both = (
        one(p1, p2, n1, n2, scale, -margin, True, z_a, mn)
        + one(p1, p2, n1, n2, scale, margin, False, z_a, mn)
        - 1
    )
    return float(max(both, 0.0))


def _limit(analysis: str) -> int:
    if analysis == "mn_score_unconditional":
        return binary_scales.UNCONDITIONAL_LIMIT
    return binary_scales.ENUMERATION_LIMIT


def _whole(n: float, analysis: str) -> int:
    """A group size for the enumeration: whole, at least 2, at most the analysis' limit."""
    m = int(math.floor(n + 1e-9))
    limit = _limit(analysis)
    if m > limit:
        raise QuestionError(
            "analysis",
            f"{analysis} enumerates every outcome for groups of at most {limit}; this question "
            f"needs {m} in a group: use mn_score (its normal approximation is accurate at such "
            "sizes)",
        )
    return max(m, 2)


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
    if analysis in SCORE_ANALYSES:
        return _score_power(q, p1, p2, n1, n2, alpha)
    z_a = z(1 - alpha)
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
    scale = _scale_value(q)
    diff = float(binary_scales.contrast(p1, p2, scale))
    what = {"difference": "a difference", "risk_ratio": "a log risk ratio"}.get(
        scale, "a log odds ratio"
    )
    if aim == "superiority" and diff == 0:
        raise QuestionError(
            "effect.p_treatment", f"must differ from p_control ({p1:g}) for a superiority question"
        )
    if aim == "noninferiority" and not (diff > margin if higher else diff < margin):
        side = "above" if higher else "below"
        raise QuestionError(
            "effect.p_treatment",
            f"{p2:g} gives {what} {diff:.4g} that must lie {side} the margin {margin:g}",
        )
    if aim == "equivalence" and not abs(diff) < margin:
        raise QuestionError(
            "effect.p_treatment",
            f"{p2:g} gives {what} {diff:.4g} outside the equivalence bounds ±{margin:g}",
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
        # Farrington & Manning (1990): n1 = [z_a·√V0 + z_b·√V1]² / μ², V0 from the restricted
        # MLE under the margin, V1 from the assumed proportions (per control unit), μ the score
        # numerator's mean (p2 − p1 − δ; p2 − θ·p1 on the risk ratio; the odds-ratio score).
        z_a = z(1 - alpha)
        mean, sd1, sd0, (q1, q2) = binary_scales.normal_parts(
            p1, p2, 1.0, r, _scale_value(q), margin
        )
        n1 = (z_a * sd0 + z_b * sd1) ** 2 / mean**2
        details["restricted_mle"] = {"p_control": q1, "p_treatment": q2}
    elif analysis in ENUMERATED:
        n1, details = _enumerated_n(q, p1, p2, r, alpha, analysis)
    elif aim == "noninferiority" and analysis not in SCORE_ANALYSES:
        z_a = z(1 - alpha)
        n1 = (z_a + z_b) ** 2 * (p1 * (1 - p1) + p2 * (1 - p2) / r) / (p2 - p1 - margin) ** 2
    else:
        # Both one-sided tests must reject (or the Miettinen-Nurminen variance depends on N):
        # no closed form, so solve the curve.
        target = float(q["target_power"])
        f = lambda n: _power_at(q, p1, p2, n, r * n, alpha) - target  # noqa: E731
        hi = 16.0
        while f(hi) < 0:
            hi *= 4
            if hi > 1e12:
                raise QuestionError(
                    "effect.p_treatment", "the difference is too close to the bounds to plan for"
                )
        # the Miettinen-Nurminen factor N/(N − 1) needs more than one subject in all
        lo = 1.0 if analysis == "mn_score" else 1e-6
        n1 = lo if f(lo) >= 0 else root(f, lo, hi)
    return Solution(per_group=[n1, r * n1], details=details)


def _enumerated_n(
    q: dict, p1: float, p2: float, r: float, alpha: float, analysis: str
) -> tuple[float, dict]:
    """The smallest whole control-group size whose enumerated power reaches the target.

    Starts below the normal-approximation size of the MN test (at it for the conservative exact
    unconditional test) and walks up one at a time (the exact power is saw-toothed in n, so the
    first n reaching the target is reported; a larger n may fall back below it).
    """
    target = float(q["target_power"])
    approx = dict(q, analysis="mn_score")
    asym = solve_n(approx, alpha).per_group[0]
    limit = _limit(analysis)

    def too_large() -> QuestionError:
        return QuestionError(
            "analysis",
            f"{analysis} enumerates every outcome for groups of at most {limit}; this question "
            f"needs more (the normal approximation of the score test asks about {asym:.0f} in "
            "the control group): use mn_score",
        )

    if asym > 1.5 * limit:
        raise too_large()
    start = 0.7 if analysis == "mn_score_enumerated" else 0.95
    n1 = max(2, int(start * asym))
    while True:
        n2 = math.ceil(r * n1 - 1e-9)
        if max(n1, n2) > limit:
            raise too_large()
        if _power_at(q, p1, p2, n1, n2, alpha) >= target:
            return float(n1), {"normal_approximation_per_group": [asym, r * asym]}
        n1 += 1


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

    scale = _scale_value(q)
    if aim == "equivalence":
        start = p1
        end = min(max(float(binary_scales.at_bound(p1, sign * margin, scale)), _EDGE), 1.0 - _EDGE)
        if f(start) < 0:
            raise power_unreachable("sample_size.per_group", target, per_group)
        if f(end) >= 0:
            return {"field": "p_treatment", "value": float(end)}
        return {"field": "p_treatment", "value": root(f, start, end)}
    start = p1 if aim == "superiority" else float(binary_scales.at_bound(p1, margin, scale))
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
        scale = _scale_value(q)
        notes = [
            f"One-sided tests at alpha against the margin {margin:g} on the difference of the "
            "treatment and control proportions."
            if scale == "difference"
            else _ratio_margin_note(aim, margin, scale)
        ]
        if analysis in ("mn_score", *ENUMERATED) or scale != "difference":
            return _score_block(analysis, label, what, scale, notes)
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


_SCALE_WORDS = {
    "difference": "difference of proportions",
    "risk_ratio": "risk ratio",
    "odds_ratio": "odds ratio",
}


def _ratio_margin_note(aim: str, margin: float, scale: str) -> str:
    words = _SCALE_WORDS[scale]
    if aim == "equivalence":
        return (
            f"One-sided tests at alpha against the limits {math.exp(-margin):.4g} and "
            f"{math.exp(margin):.4g} on the {words}, treatment over control (±{margin:g} on the "
            "log scale); both must reject."
        )
    return (
        f"One-sided test at alpha against the limit {math.exp(margin):.4g} on the {words}, "
        f"treatment over control ({margin:g} on the log scale)."
    )


def _score_block(analysis: str, label: str, what: str, scale: str, notes: list[str]) -> dict:
    """The method block of the score tests on any scale."""
    words = _SCALE_WORDS[scale]
    notes.append(
        f"Score test on the {words}: the variance under H0 uses the maximum-likelihood "
        f"proportions restricted to a {words} equal to the margin; under the alternative, the "
        "assumed proportions."
    )
    if analysis == "score":
        reference = "Farrington & Manning (1990), Stat Med 9:1447"
        if scale == "odds_ratio":
            notes.append(
                "On the odds ratio the score is Miettinen & Nurminen's (1985); its variance under "
                "the alternative is the delta-method one at the assumed proportions, as "
                "Farrington & Manning do for the difference and the risk ratio."
            )
            reference += "; Miettinen & Nurminen (1985), Stat Med 4:213"
        return analytic_method(
            analysis,
            label,
            f"normal approximation with restricted-MLE variance, {what}",
            reference,
            notes,
            {},
        )
    notes.append(
        "Miettinen-Nurminen: the null variance is multiplied by N/(N − 1), N the total size; "
        "the sample size is found on the power curve (no closed form)."
    )
    if analysis == "mn_score":
        return analytic_method(
            analysis,
            label,
            f"normal approximation with restricted-MLE variance, {what}",
            "Miettinen & Nurminen (1985), Stat Med 4:213; Farrington & Manning (1990)",
            notes,
            {},
        )
    if analysis == "mn_score_unconditional":
        notes.append(
            "Exact unconditional test: each table's p-value is the largest probability, over "
            f"{binary_scales.NUISANCE_POINTS} grid points of the control proportion on the null "
            "boundary, of a table whose score statistic is at least as extreme (Suissa & Shuster "
            "1985; Chan 1998 against a margin); the type I error never exceeds alpha at those "
            "points. Power is summed over every table at whole group sizes of at most "
            f"{binary_scales.UNCONDITIONAL_LIMIT}; the answer is the first n reaching the target "
            "(the power is saw-toothed in n)."
        )
        return analytic_method(
            analysis,
            label,
            f"exact unconditional test, power by complete enumeration, {what}",
            "Suissa & Shuster (1985), JRSS A 148:317; Chan (1998), Stat Med 17:1403; "
            "Miettinen & Nurminen (1985)",
            notes,
            {},
        )
    notes.append(
        "Power is exact for this asymptotic test: the probability of rejecting is summed over "
        "every outcome (events in control × events in treatment) at whole group sizes of at "
        f"most {binary_scales.ENUMERATION_LIMIT}. The test itself is the normal-approximation "
        "score test, not an exact (maximized p-value) test, so its attained type I error can "
        "differ from alpha. The exact power is saw-toothed in n: the answer is the smallest n "
        "reaching the target, starting below the normal-approximation size; a slightly larger n "
        "can fall back under it."
    )
    return analytic_method(
        analysis,
        label,
        f"exact enumeration of the score test's rejection region, {what}",
        "Miettinen & Nurminen (1985), Stat Med 4:213; power by complete enumeration",
        notes,
        {},
    )


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Bernoulli groups at the two proportions."""
    return [
        {"family": "bernoulli", "p": _prob(q, "p_control")},
        {"family": "bernoulli", "p": _prob(q, "p_treatment")},
    ]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    """Treatment p set to the control's (plus the margin against a margin): the null boundary."""
    margin = rule.margin if rule.aim != "superiority" else 0.0
    scale = _scale_value(q)
    p0 = float(binary_scales.at_bound(arms[0]["p"], margin, scale))
    if not 0 <= p0 <= 1:
        raise QuestionError(
            "hypothesis.margin",
            f"control p + margin = {p0:g} is not a probability; the null cannot be simulated",
        )
    how = (
        "treatment p set to control's"
        if rule.aim == "superiority"
        else "treatment p set to control's plus the margin"
        if scale == "difference"
        else f"treatment p set to the margin's {_SCALE_WORDS[scale]} against control's"
    )
    return [arms[0], {"family": "bernoulli", "p": p0}], f"{how} ({p0:g}); the null boundary"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """p_treatment moves from p_control (or the margin's edge) in the rule's direction."""
    p1 = _prob(q, "p_control")
    sign, margin = rule.direction, rule.margin
    scale = _scale_value(q)
    if rule.aim == "equivalence":
        edge = min(max(float(binary_scales.at_bound(p1, sign * margin, scale)), 0.0), 1.0)
        return EffectAxis(edge, -sign, abs(edge - p1), inclusive=True)
    origin = p1 if rule.aim == "superiority" else float(binary_scales.at_bound(p1, margin, scale))
    room = 1.0 - origin if sign > 0 else origin
    return EffectAxis(origin, sign, room)


def settings(q: dict) -> dict:
    out = {"continuity_correction": bool(values(q, FIELDS).get("continuity_correction"))}
    if _scale_value(q) != "difference":  # difference-scale settings stay as they were
        out["scale"] = _scale_value(q)
    return out


def approximate_n(plan, target: float) -> float | None:
    from ..approximate import proportions_first

    scale = plan.settings.get("scale", "difference")
    if scale == "difference" or plan.rule.aim != "noninferiority":
        return proportions_first(plan, target)
    # a ratio margin (log scale): Farrington-Manning's size on that scale; equivalence brackets
    p1, p2 = plan.models[0]["p"], plan.models[1]["p"]
    w = plan.weights
    r = w[1] / w[0] if len(w) == 2 else 1.0
    if not (0 < p1 < 1 and 0 < p2 < 1):
        return None
    mean, sd1, sd0, _ = binary_scales.normal_parts(p1, p2, 1.0, r, scale, plan.rule.margin)
    if plan.rule.direction * mean <= 0:
        return None
    return (z(1 - plan.alpha) * sd0 + z(target) * sd1) ** 2 / mean**2


def implied_fields(q: dict, arms: list[dict]) -> dict:
    if all(a["family"] == "bernoulli" for a in arms):
        return {"fields": {"p_control": arms[0]["p"], "p_treatment": arms[1]["p"]}}
    return {"fields": {}}


SIMULATION = SimulationModel(
    data_keys=("control", "treatment"),
    default_data=default_data,
    null_data=null_data,
    kernels={
        "pooled_z": "z_pooled",
        "unpooled_z": "z_unpooled",
        "mn_score": "mn_score",
        "fisher_exact": "fisher_exact",
    },
    effect_axis=effect_axis,
    check_models=bernoulli_only,
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


def margin_words(q: dict) -> str | None:
    """On a ratio scale, the margin as limits on the ratio (with the log the investigator
    entered); on the difference, None (the report prints the number)."""
    aim, margin, _ = hypothesis(q)
    scale = _scale_value(q)
    if scale not in ("risk_ratio", "odds_ratio") or margin is None:
        return None
    words = _SCALE_WORDS[scale]
    if aim == "equivalence":
        return (
            f"to show equivalence within the limits {math.exp(-margin):.4g} to "
            f"{math.exp(margin):.4g} on the {words} (treatment over control; ±{margin:.4g} on "
            "the log scale) by two one-sided tests (TOST)"
        )
    return (
        f"to show non-inferiority with a limit of {math.exp(margin):.4g} on the {words} "
        f"(treatment over control; {margin:.4g} on the log scale)"
    )


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    if v.get("p_treatment") is None or v.get("p_control") is None:
        return None
    scale = _scale_value(q)
    if scale not in binary_scales.SCALES:
        return None  # refused on analysis_options.scale by the design's checks
    # on a ratio scale the log ratio, so that it compares with the (log-scale) margin
    return float(binary_scales.contrast(float(v["p_control"]), float(v["p_treatment"]), scale))


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
        margin=margin_words,
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
