"""Ordinal outcome, two groups: the Wilcoxon-Mann-Whitney rank-sum test, Noether's (1987) total
from P(Y > X) + ½P(Y = X), and the proportional-odds analysis of Whitehead (1993) from a common
odds ratio and the control group's category probabilities. The continuous two-group cell reuses
the rank-sum functions."""

from __future__ import annotations

import math

from scipy import special

from .. import implied, models
from ..errors import QuestionError
from ..quantiles import normal_effect, normal_power, power_unreachable, z_alpha, z_sum
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
        "prob_superiority",
        "effect",
        "number",
        "Probability that a treatment outcome beats a control outcome, ties counted half.",
        "probability of superiority",
        unit="proportion",
        minimum=0,
        maximum=1,
        exclusive_minimum=True,
        exclusive_maximum=True,
    ),
    Field(
        "odds_ratio",
        "effect",
        "number",
        "Common odds ratio, treatment over control, of a response in a given category or a higher "
        "one (the same at every cut of the scale: proportional odds); above 1 when treatment "
        "shifts responses up.",
        "common odds ratio",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "category_probs",
        "assumptions",
        "number_list",
        "Probability of each category in the control group, lowest category first; they sum to 1.",
        "control-group category probabilities",
        unit="proportion",
        minimum=0,
        maximum=1,
        min_items=2,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = ((), ("odds_ratio", "category_probs"))
ANALYSES = (
    Analysis(
        "rank_sum",
        "Wilcoxon-Mann-Whitney rank-sum test",
        ("analytic", "simulation"),
        ("superiority",),
        "Noether 1987, JASA 82:645",
    ),
    Analysis(
        "proportional_odds",
        "proportional-odds score test (rank-sum test on the categories)",
        ("analytic", "simulation"),
        ("superiority",),
        "Whitehead 1993, Stat Med 12:2257",
    ),
)

groups = two_groups
allocation = two_group_allocation
_SUM_TOLERANCE = 1e-6


def _category_rules(errors: dict, v: dict, find: str, from_data: bool) -> None:
    """The control-group category probabilities must sum to 1 over at least two used categories."""
    probs = v.get("category_probs")
    if not isinstance(probs, list) or not all(
        isinstance(p, (int, float)) and not isinstance(p, bool) for p in probs
    ):
        return  # a type error, reported by the schema
    total = math.fsum(probs)
    path = "assumptions.category_probs"
    if abs(total - 1.0) > _SUM_TOLERANCE:
        errors.setdefault(path, []).append(
            f"must sum to 1 (one probability per category, lowest first); got a sum of {total:.6g}"
        )
    if sum(1 for p in probs if p > 0) < 2:
        errors.setdefault(path, []).append(
            "needs at least two categories with a probability above 0 (else there is nothing to "
            "compare)"
        )


validate = make_validate(
    FIELDS, FORMS, "prob_superiority", ("prob_superiority",), rules=_category_rules
)


def _po_posted(q: dict) -> bool:
    v = values(q, FIELDS)
    return v.get("odds_ratio") is not None or v.get("category_probs") is not None


def default_analysis(q: dict) -> str:
    """proportional_odds when the odds ratio or the category probabilities are given."""
    return "proportional_odds" if _po_posted(q) else "rank_sum"


def _analysis(q: dict, method: str | None = "analytic") -> str:
    """The analysis, checked against the form of the effect it needs."""
    analysis = analysis_of(q, DESIGN, method)
    v = values(q, FIELDS)
    if analysis == "proportional_odds":
        if v.get("category_probs") is None:
            raise QuestionError(
                "assumptions.category_probs",
                "is required for analysis proportional_odds (the control group's probability of "
                "each category, lowest first)",
            )
        if v.get("prob_superiority") is not None:
            raise QuestionError(
                "effect.prob_superiority",
                "analysis proportional_odds takes effect.odds_ratio; give odds_ratio or use "
                "analysis rank_sum",
            )
    elif _po_posted(q):
        raise QuestionError(
            "analysis",
            f"odds_ratio and category_probs are answered by analysis proportional_odds; got "
            f"{analysis!r}, which takes prob_superiority",
        )
    return analysis


def _cumulative(probs: list[float]) -> list[float]:
    """Control cumulative probabilities P(Y ≤ j) below the top category."""
    out, acc = [], 0.0
    for p in probs[:-1]:
        acc += float(p)
        out.append(min(acc, 1.0))
    return out


def po_treatment_probs(probs: list[float], odds_ratio: float) -> list[float]:
    """Treatment category probabilities under proportional odds: the odds of a response in
    category j or above are the control's times ``odds_ratio`` at every j."""
    cum_t = [c / (c + odds_ratio * (1.0 - c)) if 0 < c < 1 else c for c in _cumulative(probs)]
    edges = [0.0, *cum_t, 1.0]
    return [max(edges[j + 1] - edges[j], 0.0) for j in range(len(probs))]


def _po_inputs(q: dict) -> tuple[float, list[float]]:
    v = values(q, FIELDS)
    probs = [float(p) for p in v["category_probs"]]
    errors: dict = {}
    _category_rules(errors, v, "", False)
    for path, messages in errors.items():
        raise QuestionError(path, messages[0])
    odds_ratio = number(q, FIELDS, "odds_ratio", required=False)
    if odds_ratio is None:
        raise QuestionError("effect.odds_ratio", "is required for analysis proportional_odds")
    return odds_ratio, probs


def po_factor(probs: list[float], odds_ratio: float, c: float) -> float:
    """1 − Σ p̄ᵢ³, p̄ the category probabilities averaged over the groups with the allocation
    weights (control share c; the simple average for equal groups, Whitehead 1993)."""
    treated = po_treatment_probs(probs, odds_ratio)
    return 1.0 - math.fsum(
        (c * a + (1.0 - c) * b) ** 3 for a, b in zip(probs, treated, strict=True)
    )


def _po_shift(odds_ratio: float, probs: list[float], n1: float, n2: float) -> float:
    """|ln OR| divided by its standard error N·c(1 − c)·(1 − Σ p̄³)/3 to the −½ (Whitehead 1993)."""
    total = n1 + n2
    c = n1 / total
    info = total * c * (1.0 - c) * po_factor(probs, odds_ratio, c) / 3.0
    return abs(math.log(odds_ratio)) * math.sqrt(info)


def _shift(p: float, n1: float, n2: float) -> float:
    """Return the standardized mean of the rank-sum statistic under the alternative."""
    total = n1 + n2
    c = n1 / total
    return math.sqrt(12.0 * c * (1.0 - c) * total) * abs(p - 0.5)


def power_at(p: float, n1: float, n2: float, alpha: float, tails: int) -> float:
    """Noether's normal-approximation power at P(Y > X) = p with n1 control, n2 treatment."""
    return normal_power(_shift(p, n1, n2), z_alpha(alpha, tails), tails)


def solve(
    p: float, weights: list[float], alpha: float, tails: int, target: float
) -> tuple[list[float], dict]:
    """Return (raw n per group, details) from N = (z_a + z_b)² / (12·c(1 − c)·(p − ½)²)."""
    c = weights[0] / sum(weights)
    z_total = z_sum(alpha, tails, target)
    total = z_total**2 / (12.0 * c * (1.0 - c) * (p - 0.5) ** 2)
    return [c * total, (1.0 - c) * total], {"total_raw": total}


def method_block(q: dict, analysis: str, label: str) -> dict:
    """The analytic method block of Noether's approximation."""
    return analytic_method(
        analysis,
        label,
        "Noether's normal approximation",
        "Noether (1987), JASA 82:645",
        [
            "The effect is P(Y > X) with Y from the treatment group; the total N is split by the "
            "allocation, c = n_control / N.",
            "Against the t test on normal data the rank-sum test keeps 3/π ≈ 95.5% efficiency "
            "(Hodges & Lehmann 1956).",
        ],
        {},
    )


def _p(q: dict) -> float:
    _analysis(q)
    return number(q, FIELDS, "prob_superiority")


def _po_solve_n(q: dict, alpha: float) -> Solution:
    """Whitehead's (1993) total N = 3(z_a + z_b)² / (c(1 − c)·(ln OR)²·(1 − Σ p̄³)), c the
    control share (12(...)² / (...) for equal groups: 6(...)² / (...) per group)."""
    odds_ratio, probs = _po_inputs(q)
    if odds_ratio == 1:
        raise QuestionError("effect.odds_ratio", "must differ from 1 (no effect); got 1")
    weights = allocation(q)
    c = weights[0] / sum(weights)
    z_total = z_sum(alpha, tails(q), float(q["target_power"]))
    factor = po_factor(probs, odds_ratio, c)
    total = 3.0 * z_total**2 / (c * (1.0 - c) * math.log(odds_ratio) ** 2 * factor)
    return Solution(per_group=[c * total, (1.0 - c) * total], details={"total_raw": total})


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per group from Noether's or Whitehead's total."""
    if _analysis(q) == "proportional_odds":
        return _po_solve_n(q, alpha)
    p = _p(q)
    if p == 0.5:
        raise QuestionError("effect.prob_superiority", "must differ from 0.5 (no effect); got 0.5")
    per_group, details = solve(p, allocation(q), alpha, tails(q), float(q["target_power"]))
    return Solution(per_group=per_group, details=details)


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return Noether's (or Whitehead's) normal-approximation power at the given n per group."""
    n1, n2 = float(per_group[0]), float(per_group[1])
    if _analysis(q) == "proportional_odds":
        odds_ratio, probs = _po_inputs(q)
        shift = _po_shift(odds_ratio, probs, n1, n2)
        return normal_power(shift, z_alpha(alpha, tails(q)), tails(q))
    return power_at(_p(q), n1, n2, alpha, tails(q))


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return P(Y > X) nearest ½ (above unless lower is better) reaching the target power."""
    if _analysis(q) == "proportional_odds":
        return _po_solve_effect(q, per_group, alpha)
    n1, n2 = float(per_group[0]), float(per_group[1])
    z_a = z_alpha(alpha, tails(q))
    target = float(q["target_power"])
    unit = _shift(1.0, n1, n2) / 0.5  # shift per unit of |p − ½|
    # |p − ½| cannot exceed ½; beyond that no effect reaches the target at this n.
    if normal_power(unit * 0.5, z_a, tails(q)) <= target:
        raise power_unreachable("sample_size.per_group", target, per_group)
    x = normal_effect(unit, z_a, tails(q), target, 0.5)
    higher = hypothesis(q)[2]
    return {"field": "prob_superiority", "value": 0.5 + x if higher else 0.5 - x}


def _po_solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """The common odds ratio nearest 1 (above unless lower is better) reaching the target."""
    v = values(q, FIELDS)
    probs = [float(p) for p in v["category_probs"]]
    n1, n2 = float(per_group[0]), float(per_group[1])
    z_a = z_alpha(alpha, tails(q))
    target = float(q["target_power"])
    sign = 1.0 if hypothesis(q)[2] else -1.0

    def power_of(log_or: float) -> float:
        return normal_power(_po_shift(math.exp(sign * log_or), probs, n1, n2), z_a, tails(q))

    top = 12.0  # an odds ratio of e^12: beyond it the categories no longer move
    if power_of(top) < target:
        raise power_unreachable("sample_size.per_group", target, per_group)
    lo, hi = 0.0, top
    for _ in range(200):  # bisection: the power rises with |ln OR|
        mid = 0.5 * (lo + hi)
        if power_of(mid) < target:
            lo = mid
        else:
            hi = mid
        if hi - lo < 1e-12:
            break
    return {"field": "odds_ratio", "value": math.exp(sign * hi)}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    analysis = _analysis(q)
    if analysis == "proportional_odds":
        if values(q, FIELDS).get("odds_ratio") is None:  # find = effect: solved for
            implied = "Treatment category probabilities follow from the solved odds ratio."
        else:
            odds_ratio, probs = _po_inputs(q)
            treated = ", ".join(f"{p:.4g}" for p in po_treatment_probs(probs, odds_ratio))
            implied = (
                f"Treatment category probabilities implied by the odds ratio: {treated} (lowest "
                "first)."
            )
        return analytic_method(
            analysis,
            DESIGN.analysis(analysis).label,
            "Whitehead's normal approximation for the log odds ratio",
            "Whitehead (1993), Stat Med 12:2257",
            [
                "N = 3(z_a + z_b)² / (c(1 − c)·(ln OR)²·(1 − Σ p̄³)), c = n_control / N; "
                "p̄ the category probabilities averaged over the two groups (weighted by the "
                "allocation).",
                implied,
                "The score test of the proportional-odds model at OR = 1 is the rank-sum test on "
                "the categories with tied ranks averaged; the simulation uses that tie-corrected "
                "rank-sum z.",
            ],
            {},
        )
    return method_block(q, analysis, DESIGN.analysis(analysis).label)


def derive(q: dict) -> dict:
    """Nothing is derived: the probability of superiority is the effect itself."""
    return {}


# --- simulation -------------------------------------------------------------------------------


_UNIT = {"family": "uniform", "low": 0.0, "high": 1.0}


def default_data(q: dict) -> list[dict]:
    """Unit normal groups whose means differ by √2·Φ⁻¹(p), so that P(Y > X) = p.

    Under proportional odds: a uniform per subject, read as a latent logistic variable (shifted
    by ln OR in the treatment group) and cut into categories at the control group's cumulative
    probabilities (the ``po_rank_sum`` kernel; ``settings`` carries the cut points).
    """
    if _po_posted(q):
        odds_ratio, _ = _po_inputs(q)
        return [dict(_UNIT), {**_UNIT, "shift": math.log(odds_ratio)}]
    p = number(q, FIELDS, "prob_superiority")
    delta = math.sqrt(2.0) * float(special.ndtri(p))
    return [
        {"family": "normal", "mean": 0.0, "sd": 1.0},
        {"family": "normal", "mean": delta, "sd": 1.0},
    ]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    """Treatment drawn from the control distribution."""
    return [
        arms[0],
        dict(arms[0]),
    ], "treatment drawn from the control distribution (P(Y > X) = 1/2)"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """P(Y > X) moves away from ½ in the rule's direction, up to 0 or 1."""
    return EffectAxis(0.5, rule.direction, 0.5)


def approximate_n(plan, target: float) -> float | None:
    """Noether's first-group size with P(Y > X) from the data models themselves (none under
    proportional odds: the analytic start is Whitehead's)."""
    if "category_cumulative" in plan.settings:
        return None
    from ..approximate import noether_first

    return noether_first(plan, target)


def settings(q: dict) -> dict:
    """Under proportional odds, the control group's cumulative probabilities (the cut points)."""
    if not _po_posted(q):
        return {}
    _, probs = _po_inputs(q)
    return {"category_cumulative": _cumulative(probs)}


def check_models(q: dict, arms: list[dict], labels: list[str]) -> None:
    """The proportional-odds analysis draws its data from odds_ratio and category_probs only."""
    analysis = _analysis(q, q.get("method") or "analytic")
    if analysis == "proportional_odds" and (q.get("simulation") or {}).get("data"):
        raise QuestionError(
            "simulation.data",
            "the proportional_odds analysis simulates categories from effect.odds_ratio and "
            "assumptions.category_probs; remove simulation.data",
        )


def data_block(arms: list[dict], labels: list[str], settings: dict) -> dict:
    """The record's ``method.data``: the categorical model in words under proportional odds."""
    cum = settings.get("category_cumulative")
    if cum is None:
        return {lab: models.public(a) for lab, a in zip(labels, arms, strict=True)}
    shift = float(arms[1].get("shift", 0.0))
    return {
        "model": "proportional odds: a latent logistic variable per subject, shifted by ln OR in "
        "the treatment group, cut into categories at the control group's cumulative "
        "probabilities",
        "control_cumulative": list(cum),
        "odds_ratio": math.exp(shift),
    }


def implied_fields(q: dict, arms: list[dict]) -> dict:
    """P(Y > X) + ½P(Y = X) between the posted groups, by quadrature."""
    return {"fields": {"prob_superiority": implied.prob_superiority(arms[0], arms[1])}}


def planned_moments(q: dict) -> tuple[float, float, float, float]:
    """(control mean, difference, sd_control, sd_treatment) of the planned data: the posted
    groups' moments, else unit normals shifted to give P(Y > X) (as ``default_data``)."""
    data = (q.get("simulation") or {}).get("data")
    if isinstance(data, dict) and {"control", "treatment"} <= set(data):
        found = []
        for name in ("control", "treatment"):
            mean, var = models.moments(models.check_arm(data[name], f"simulation.data.{name}"))
            if mean is None or var is None or not math.isfinite(var):
                raise QuestionError(
                    f"simulation.data.{name}",
                    "the robustness panel matches each departure to the group's mean and SD; "
                    f"the {data[name].get('family')!r} group has none",
                )
            found.append((mean, math.sqrt(var)))
        (m0, s0), (m1, s1) = found
        return m0, m1 - m0, s0, s1
    if _po_posted(q):
        raise QuestionError(
            "analysis",
            "the robustness panel moves group means and SDs; it is not offered for the "
            "proportional_odds analysis",
        )
    p = values(q, FIELDS).get("prob_superiority")
    if isinstance(p, bool) or not isinstance(p, (int, float)) or not 0 < p < 1:
        raise QuestionError(
            "effect.prob_superiority", f"must be a number in (0, 1) for the panel; got {p!r}"
        )
    return 0.0, default_data(q)[1]["mean"], 1.0, 1.0


SIMULATION = SimulationModel(
    data_keys=("control", "treatment"),
    default_data=default_data,
    null_data=null_data,
    kernels={"rank_sum": "rank_sum", "proportional_odds": "po_rank_sum"},
    effect_axis=effect_axis,
    check_models=check_models,
    settings=settings,
    data_block=data_block,
    implied_contrast=lambda arms: models.center(arms[1]) - models.center(arms[0]),
    implied_fields=implied_fields,
    approximate_n=approximate_n,
    planned_moments=planned_moments,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    odds_ratio = values(q, FIELDS).get("odds_ratio")
    if odds_ratio is None and values(q, FIELDS).get("category_probs") is not None:
        odds_ratio = stated_effect(q, record, FIELDS, "odds_ratio")
    if odds_ratio is not None:
        return (
            f"a common odds ratio of {fmt(odds_ratio)} (treatment over control) for a response "
            "in any given category or a higher one (proportional odds)"
        )
    value = stated_effect(q, record, FIELDS, "prob_superiority")
    if value is None:
        return "the probability that a treatment outcome beats a control outcome"
    return (
        f"a probability of {fmt(value)} that a treatment outcome beats a control outcome "
        "(ties counted half)"
    )


def assumptions_sentence(q: dict) -> str:
    probs = values(q, FIELDS).get("category_probs")
    if not probs:
        return ""
    shown = ", ".join(fmt(p) for p in probs)
    return f"control-group category probabilities {shown} (lowest category first)"


def _contrast(q: dict) -> float | None:
    """P(Y > X) − ½, or ln OR under proportional odds (0 when there is no effect)."""
    v = values(q, FIELDS)
    odds_ratio = v.get("odds_ratio")
    if isinstance(odds_ratio, (int, float)) and not isinstance(odds_ratio, bool):
        return math.log(odds_ratio) if odds_ratio > 0 else None
    if v.get("prob_superiority") is None:
        return None
    return v["prob_superiority"] - 0.5


DESIGN = Design(
    outcome="ordinal",
    layout="two_groups",
    label="Ordinal outcome, two groups",
    fields=FIELDS,
    forms=FORMS,
    solved="prob_superiority",
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
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_pain_score_ranks.json",
    contrast=_contrast,
    null_effect=lambda q: 1.0 if values(q, FIELDS).get("odds_ratio") is not None else 0.5,
)
