"""Binary outcome, paired: McNemar's test of matched pairs (both conditions on the same patient,
or matched patients), from the discordant proportions or from the marginal rates and the
correlation of the paired outcomes.

With p_treatment_only = P(event under treatment, none under control) and p_control_only the
reverse, ψ = their sum and δ = their difference, Connor (1987) gives
n = [z_α·√ψ + z_β·√(ψ − δ²)]² / δ² pairs. The exact conditional test (a binomial test of the
treatment-only pairs among the discordant ones against 1/2) is powered by exact enumeration over
the number of discordant pairs; its curve is saw-toothed, so both n's are reported as for the
single-group exact test.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from .. import exact_binomial
from ..errors import QuestionError
from ..quantiles import power_unreachable, root, z, z_alpha
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
from .binary_single_group import exact_search_sentence
from .common import (
    analytic_method,
    checked_analysis,
    fmt,
    hypothesis,
    make_validate,
    no_warnings,
    one_group,
    one_group_allocation,
    tails,
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
        "p_treatment_only",
        "effect",
        "number",
        "Expected proportion of pairs with the event under treatment but not under control.",
        "proportion of pairs with the event under treatment only",
        **_PROPORTION,
    ),
    Field(
        "p_control_only",
        "assumptions",
        "number",
        "Expected proportion of pairs with the event under control but not under treatment.",
        "proportion of pairs with the event under control only",
        **_PROPORTION,
    ),
    Field(
        "p_treatment",
        "effect",
        "number",
        "Expected proportion with the event under treatment (instead of the discordant "
        "proportions, with p_control and correlation).",
        "event proportion under treatment",
        **_PROPORTION,
    ),
    Field(
        "p_control",
        "assumptions",
        "number",
        "Expected proportion with the event under control.",
        "event proportion under control",
        **_PROPORTION,
    ),
    Field(
        "correlation",
        "assumptions",
        "number",
        "Correlation (phi coefficient) between a pair's two yes/no outcomes.",
        "correlation of the paired outcomes",
        minimum=-1,
        maximum=1,
        exclusive_minimum=True,
        exclusive_maximum=True,
    ),
)
FORMS = (("p_control_only",), ("p_treatment", "p_control", "correlation"))
ANALYSES = (
    Analysis(
        "mcnemar",
        "McNemar's test",
        ("analytic", "simulation"),
        ("superiority",),
        "McNemar 1947; Connor 1987",
    ),
    Analysis(
        "exact_mcnemar",
        "exact McNemar test (conditional binomial test of the discordant pairs)",
        ("analytic", "simulation"),
        ("superiority",),
        "exact binomial test of the discordant pairs; power by exact enumeration",
        size_search="the smallest number of pairs from which the exact test's power stays at or "
        "above the target for every larger number checked",
    ),
)
ANSWER = "stays_above_from"
EXACT_LIMIT = 5000  # the exact curve costs ~ n² per search; beyond this McNemar's z answers
_EDGE = 1e-9


validate = make_validate(FIELDS, FORMS, "p_treatment_only")


def _setup(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def discordant(q: dict) -> tuple[float, float]:
    """Return (p_treatment_only, p_control_only), from the posted form (checked)."""
    v = values(q, FIELDS)
    if v.get("p_treatment") is not None:
        pt, pc, rho = float(v["p_treatment"]), float(v["p_control"]), float(v["correlation"])
        both = pt * pc + rho * math.sqrt(pt * (1 - pt) * pc * (1 - pc))
        p10, p01 = pt - both, pc - both
        neither = 1.0 - both - p10 - p01
        if min(both, p10, p01, neither) < -1e-12:
            raise QuestionError(
                "assumptions.correlation",
                f"{rho:g} is not possible with event proportions {pt:g} and {pc:g}: a cell of "
                "the paired table would be negative",
            )
        return max(p10, 0.0), max(p01, 0.0)
    p10, p01 = v.get("p_treatment_only"), v.get("p_control_only")
    if p10 is None or p01 is None:
        raise QuestionError("effect.p_treatment_only", "is required for this question")
    if p10 + p01 > 1:
        raise QuestionError(
            "effect.p_treatment_only",
            f"plus p_control_only must be at most 1; got {p10:g} + {p01:g}",
        )
    return float(p10), float(p01)


def derive(q: dict) -> dict:
    """The discordant proportions when the marginal form was posted, else nothing."""
    v = values(q, FIELDS)
    if v.get("p_treatment") is None or v.get("p_control") is None or v.get("correlation") is None:
        return {}
    p10, p01 = discordant(q)
    return {"p_treatment_only": p10, "p_control_only": p01}


def _direction(p10: float, p01: float, q: dict) -> int:
    if p10 != p01:
        return 1 if p10 > p01 else -1
    return 1 if hypothesis(q)[2] else -1


def connor_n(p10: float, p01: float, alpha: float, count: int, target: float) -> float:
    """Connor (1987): n = [z_α·√ψ + z_β·√(ψ − δ²)]² / δ² pairs."""
    psi, delta = p10 + p01, p10 - p01
    return (
        z_alpha(alpha, count) * math.sqrt(psi) + z(target) * math.sqrt(psi - delta**2)
    ) ** 2 / delta**2


def _connor_power(p10: float, p01: float, n: float, alpha: float, count: int) -> float:
    psi, delta = p10 + p01, abs(p10 - p01)
    sd = math.sqrt(psi - delta**2)
    z_a = z_alpha(alpha, count)
    if sd == 0:
        return 1.0 if delta * math.sqrt(n) > z_a * math.sqrt(psi) else 0.0
    out = stats.norm.cdf((delta * math.sqrt(n) - z_a * math.sqrt(psi)) / sd)
    if count == 2:
        out += stats.norm.cdf((-delta * math.sqrt(n) - z_a * math.sqrt(psi)) / sd)
    return float(min(out, 1.0))


def _exact_power(p10: float, p01: float, n: np.ndarray, alpha: float, q: dict) -> np.ndarray:
    psi = p10 + p01
    return exact_binomial.conditional_power(
        n, psi, p10 / psi, alpha, tails(q), _direction(p10, p01, q)
    )


def _power_at(q: dict, p10: float, p01: float, n: float, alpha: float) -> float:
    if _setup(q) == "mcnemar":
        return _connor_power(p10, p01, n, alpha, tails(q))
    whole = max(int(math.floor(n + 1e-9)), 1)
    return float(_exact_power(p10, p01, np.array([whole]), alpha, q)[0])


def solve_n(q: dict, alpha: float) -> Solution:
    """Connor's n; for the exact test, both saw-tooth answers (the answer is the second)."""
    analysis = _setup(q)
    p10, p01 = discordant(q)
    if p10 == p01:
        raise QuestionError(
            "effect.p_treatment_only"
            if values(q, FIELDS).get("p_treatment") is None
            else "effect.p_treatment",
            "gives no difference between the discordant proportions "
            f"({p10:g} and {p01:g}); McNemar's test needs one",
        )
    target = float(q["target_power"])
    start = connor_n(p10, p01, alpha, tails(q), target)
    if analysis == "mcnemar":
        return Solution(per_group=[start])
    if start > EXACT_LIMIT:
        raise QuestionError(
            "analysis",
            f"the exact test's search is offered up to about {EXACT_LIMIT:,} pairs (Connor's "
            f"formula gives {start:,.0f}); use mcnemar, accurate at that size",
        )
    found = exact_binomial.first_and_stays(
        lambda n: _exact_power(p10, p01, n, alpha, q),
        target,
        start,
        field="effect.p_treatment_only",
        limit=4 * EXACT_LIMIT,
    )
    block = {
        "first_reaching": found.first_reaching,
        "stays_above_from": found.stays_above_from,
        "answer": ANSWER,
        "checked_through": found.checked_through,
        "dips_below_target": found.dips,
        "normal_approximation": start,
    }
    return Solution(
        per_group=[float(found.stays_above_from)],
        details={"sample_size_details": {"exact_search": block}},
    )


def power(q: dict, per_group: list[float], alpha: float) -> float:
    p10, p01 = discordant(q)
    return _power_at(q, p10, p01, float(per_group[0]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """The treatment-only proportion reaching the target, p_control_only given."""
    _setup(q)
    v = values(q, FIELDS)
    p01 = v.get("p_control_only")
    if p01 is None:
        raise QuestionError(
            "assumptions.p_control_only", "is required for find = effect (the discordant form)"
        )
    p01 = float(p01)
    n = float(per_group[0])
    target = float(q["target_power"])
    higher = hypothesis(q)[2]
    start = p01 + (_EDGE if higher else -_EDGE)
    end = (1.0 - p01 - _EDGE) if higher else _EDGE

    def f(p10: float) -> float:
        return _power_at(q, p10, p01, n, alpha) - target

    if not (0 < start < 1) or f(end) < 0:
        raise power_unreachable("sample_size.per_group", target, per_group)
    if f(start) >= 0:
        return {"field": "p_treatment_only", "value": float(start)}
    return {"field": "p_treatment_only", "value": root(f, start, end)}


def describe(q: dict) -> dict:
    analysis = _setup(q)
    label = DESIGN.analysis(analysis).label
    notes = [
        "ψ = p_treatment_only + p_control_only (the discordant proportion), δ their difference; "
        "only the discordant pairs carry information.",
    ]
    if derive(q):
        notes.append(
            "From the marginal rates and the correlation ρ: both = p_t·p_c + ρ·√(p_t(1 − p_t)"
            "p_c(1 − p_c)), p_treatment_only = p_t − both, p_control_only = p_c − both."
        )
    if analysis == "mcnemar":
        notes.append("n = [z_α·√ψ + z_β·√(ψ − δ²)]² / δ² pairs (Connor 1987).")
        return analytic_method(
            analysis,
            label,
            "normal approximation to McNemar's test, unconditional on the discordant pairs",
            "Connor (1987), Biometrics 43:207; McNemar (1947), Psychometrika 12:153",
            notes,
            derive(q),
        )
    notes += [
        "Given d discordant pairs, the pairs with the event under treatment only are tested "
        "against Binomial(d, 1/2) (two-sided: equal tails at alpha/2); power sums over d, the "
        "number of discordant pairs, Binomial(n, ψ), exactly.",
        "The exact power curve is saw-toothed: the answer is the smallest n from which every "
        "larger n checked reaches the target (sample_size.details.exact_search holds both n's).",
    ]
    return analytic_method(
        analysis,
        label,
        "exact enumeration over the discordant pairs",
        "exact conditional binomial test; Connor (1987), Biometrics 43:207, for the start",
        notes,
        derive(q),
    )


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    p10, p01 = discordant(q)
    return [{"family": "discordant_pairs", "p_treatment_only": p10, "p_control_only": p01}]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    p10, p01 = arms[0]["p_treatment_only"], arms[0]["p_control_only"]
    half = (p10 + p01) / 2.0
    return [
        {"family": "discordant_pairs", "p_treatment_only": half, "p_control_only": half}
    ], f"both discordant proportions set to their mean ({half:g}), the discordant total kept"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    p01 = float(values(q, FIELDS).get("p_control_only") or 0.0)
    room = 1.0 - p01 if rule.direction > 0 else p01
    return EffectAxis(p01, rule.direction, room)


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"mcnemar": "mcnemar", "exact_mcnemar": "mcnemar_exact"},
    effect_axis=effect_axis,
    data_block=lambda arms, labels, settings: {"pairs": dict(arms[0])},
    min_size=2,
    draws_words="draws the number of discordant pairs (binomial over the pairs) and, given it, "
    "how many have the event under treatment only (binomial)",
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    v = values(q, FIELDS)
    if v.get("p_treatment") is not None:
        return (
            f"an event proportion of {fmt(v['p_treatment'])} under treatment against "
            f"{fmt(v['p_control'])} under control"
        )
    p10 = v.get("p_treatment_only")
    if p10 is None and record and record.get("effect"):
        p10 = record["effect"]["value"]
    if p10 is None:
        return "the proportion of pairs with the event under treatment only"
    return f"{fmt(p10)} of pairs with the event under treatment only"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("correlation") is not None:
        return f"a correlation of {fmt(v['correlation'])} between the paired outcomes"
    p01 = v.get("p_control_only")
    return "" if p01 is None else f"{fmt(p01)} of pairs with the event under control only"


def details_sentence(record: dict) -> str:
    """The exact McNemar test's two sizes in words (``exact_search``), else ''."""
    return exact_search_sentence(record, lambda n: f"{n} pairs", "number", "size")


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    if v.get("p_treatment") is not None and v.get("p_control") is not None:
        return float(v["p_treatment"]) - float(v["p_control"])
    if v.get("p_treatment_only") is None or v.get("p_control_only") is None:
        return None
    return float(v["p_treatment_only"]) - float(v["p_control_only"])


DESIGN = Design(
    outcome="binary",
    layout="paired",
    label="Binary outcome, paired (matched pairs)",
    fields=FIELDS,
    forms=FORMS,
    solved="p_treatment_only",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "mcnemar",
    groups=one_group,
    allocation=one_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(
        effect=effect_sentence, assumptions=assumptions_sentence, details=details_sentence
    ),
    example="northbridge_antiemetic_paired.json",
    contrast=_contrast,
    null_effect=lambda q: {**values(q, FIELDS), **derive(q)}.get("p_control_only"),
)
