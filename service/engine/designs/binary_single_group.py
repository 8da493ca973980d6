"""Binary outcome, single group: one response rate against a reference rate.

The exact binomial test (default) is powered by exact enumeration over the counts, vectorized
over n; its power curve is saw-toothed, so find = sample_size reports the smallest n reaching the
target and the smallest n from which every larger n reaches it, and answers with the second. The
one-sample z test (normal approximation, null variance under H0) has the closed-form n. A
precision question (``hypothesis.aim = "estimation"``) asks for the n whose Wilson or
Clopper–Pearson interval around the planned rate is narrow enough (``engine/precision.py``).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from .. import direction, exact_binomial, precision
from ..errors import QuestionError
from ..quantiles import power_unreachable, root, z, z_alpha
from .base import (
    Analysis,
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
    checked_analysis,
    fmt,
    hypothesis,
    make_validate,
    number,
    one_group,
    one_group_allocation,
    stated_effect,
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
        "p",
        "effect",
        "number",
        "Expected response rate in the group studied.",
        "expected response rate",
        **_PROPORTION,
    ),
    Field(
        "p_null",
        "assumptions",
        "number",
        "Reference response rate the group is tested against (the rate under the null).",
        "reference rate",
        **_PROPORTION,
    ),
)
FORMS = (("p_null",),)
ANALYSES = (
    Analysis(
        "exact_binomial",
        "exact binomial test",
        ("analytic", "simulation"),
        ("superiority",),
        "Clopper & Pearson 1934; power by exact enumeration of the binomial counts",
        size_search="the smallest n from which the exact test's power stays at or above the "
        "target for every larger n checked",
    ),
    Analysis(
        "z_test",
        "one-sample z test of a proportion",
        ("analytic", "simulation"),
        ("superiority",),
        "Lachin 1981; normal approximation, null variance under H0",
    ),
    Analysis(
        "wilson_interval",
        "Wilson score interval for a proportion",
        ("analytic",),
        ("estimation",),
        "Wilson 1927, JASA 22:209",
    ),
    Analysis(
        "clopper_pearson_interval",
        "Clopper–Pearson exact interval for a proportion",
        ("analytic",),
        ("estimation",),
        "Clopper & Pearson 1934, Biometrika 26:404",
    ),
)
# the interval analyses and the method name precision.proportion_half_width takes
INTERVALS = {"wilson_interval": "wilson", "clopper_pearson_interval": "clopper_pearson"}
ANSWER = "stays_above_from"  # which of the exact search's two n's is the answer
_EDGE = 1e-9

validate = make_validate(FIELDS, FORMS, "p", ("p",))


def _rate(q: dict, name: str) -> float:
    return number(q, FIELDS, name)


def _setup(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def _direction(q: dict) -> int:
    return direction.one_sided(q, DESIGN)


def _whole(n: float) -> int:
    """The exact test counts whole subjects: a fractional analyzed n is rounded down."""
    return max(int(math.floor(float(n) + 1e-9)), 1)


def _z_power(p: float, p0: float, n: float, alpha: float, count: int) -> float:
    """Power of the z test (p̂ − p0)/√(p0(1 − p0)/n) when the true rate is p (Lachin 1981)."""
    delta = abs(p - p0)
    s0, s1 = math.sqrt(p0 * (1 - p0)), math.sqrt(p * (1 - p))
    z_a = z_alpha(alpha, count)
    out = stats.norm.cdf((delta * math.sqrt(n) - z_a * s0) / s1)
    if count == 2:
        out += stats.norm.cdf((-delta * math.sqrt(n) - z_a * s0) / s1)
    return float(min(out, 1.0))


def z_test_n(p: float, p0: float, alpha: float, count: int, target: float) -> float:
    """Return n = [z_a·√(p0(1 − p0)) + z_b·√(p(1 − p))]² / (p − p0)² (Lachin 1981)."""
    z_a, z_b = z_alpha(alpha, count), z(target)
    return (z_a * math.sqrt(p0 * (1 - p0)) + z_b * math.sqrt(p * (1 - p))) ** 2 / (p - p0) ** 2


def _power_at(q: dict, p: float, n: float, alpha: float) -> float:
    analysis = _setup(q)
    p0 = _rate(q, "p_null")
    if analysis == "z_test":
        return _z_power(p, p0, n, alpha, tails(q))
    return float(
        exact_binomial.power(np.array([_whole(n)]), p, p0, alpha, tails(q), _direction(q))[0]
    )


def _interval(q: dict) -> str:
    """The precision question's interval method (wilson unless clopper_pearson is named)."""
    return INTERVALS[analysis_of(q, DESIGN, "analytic")]


def interval_precision(q: dict, per_group: list[float]) -> dict:
    """The planned rate's interval at the analyzed size (``Estimation.precision``)."""
    return precision.proportion_interval(q, _rate(q, "p"), per_group, _interval(q))


def solve_n(q: dict, alpha: float) -> Solution:
    """z test: the closed form. Exact test: both saw-tooth answers; the answer is the second.
    A precision question: the n whose interval's half-width at the planned rate is the target."""
    if hypothesis(q)[0] == "estimation":
        hyp = q["hypothesis"]
        return precision.proportion_interval_solution(
            _rate(q, "p"), hyp["half_width"], hyp["confidence"], _interval(q)
        )
    analysis = _setup(q)
    p, p0 = _rate(q, "p"), _rate(q, "p_null")
    if p == p0:
        raise QuestionError("effect.p", f"must differ from p_null ({p0:g}); got {p:g}")
    target = float(q["target_power"])
    count = tails(q)
    start = z_test_n(p, p0, alpha, count, target)
    if analysis == "z_test":
        return Solution(per_group=[start])
    found = exact_binomial.search_n(p, p0, alpha, count, _direction(q), target, start)
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
    """Exact power at the whole analyzed n, or the z test's normal-approximation power."""
    return _power_at(q, _rate(q, "p"), float(per_group[0]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the rate nearest p_null (above it unless lower is better) reaching the target."""
    _setup(q)
    p0 = _rate(q, "p_null")
    n = float(per_group[0])
    target = float(q["target_power"])
    higher = hypothesis(q)[2]
    end = 1.0 - _EDGE if higher else _EDGE

    def f(p: float) -> float:
        return _power_at(q, p, n, alpha) - target

    if f(end) < 0:
        raise power_unreachable("sample_size.per_group", target, per_group)
    start = p0 + (_EDGE if higher else -_EDGE)
    if f(start) >= 0:
        return {"field": "p", "value": float(start)}
    return {"field": "p", "value": root(f, start, end)}


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    """The z test is rough when n·p0 or n·(1 − p0) is below 5."""
    v = values(q, FIELDS)
    if (q.get("analysis") or "exact_binomial") != "z_test" or v.get("p_null") is None:
        return []
    p0, n = float(v["p_null"]), float(per_group[0])
    expected = min(n * p0, n * (1 - p0))
    if expected >= 5:
        return []
    return [
        f"the expected count under the reference rate is {expected:.1f} (below 5): the normal "
        "approximation is rough here; the exact binomial test is safer"
    ]


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    if hypothesis(q)[0] == "estimation":
        analysis = analysis_of(q, DESIGN, "analytic")
        words = {
            "wilson_interval": "Wilson score limits (p̂ + z²/2n ± z·√(p̂(1 − p̂)/n + z²/4n²)) / "
            "(1 + z²/n)",
            "clopper_pearson_interval": "Clopper–Pearson limits from the beta quantiles of the "
            "count (exact coverage at least the confidence level)",
        }[analysis]
        return analytic_method(
            analysis,
            DESIGN.analysis(analysis).label,
            "interval half-width at the planned rate",
            DESIGN.analysis(analysis).reference,
            [
                f"Two-sided interval for the response rate: {words}.",
                "The half-width is half the interval's length when the observed proportion "
                "equals the planned one (count n·p, not rounded).",
            ],
            {},
        )
    analysis = _setup(q)
    label = DESIGN.analysis(analysis).label
    if analysis == "z_test":
        return analytic_method(
            analysis,
            label,
            "normal approximation, variance p0(1 − p0) under H0 and p(1 − p) under the alternative",
            "Lachin (1981), Controlled Clin Trials 2:93",
            ["n = [z_α·√(p0(1 − p0)) + z_β·√(p(1 − p))]² / (p − p0)²."],
            {},
        )
    notes = [
        "Power is the exact binomial probability of the rejection region at the true rate, "
        "enumerated for every n; a fractional analyzed n is rounded down to whole subjects.",
        "Two-sided: equal tails, each at alpha/2 (the p-value is twice the smaller tail). "
        "One-sided: the tail in the direction of the expected rate.",
        "The exact test's power curve is saw-toothed: a larger n can have less power. The "
        "answer is the smallest n from which every larger n reaches the target power "
        "(sample_size.details.exact_search holds both n's).",
    ]
    return analytic_method(
        analysis,
        label,
        "exact binomial enumeration",
        "Clopper & Pearson (1934), Biometrika 26:404; exact binomial power",
        notes,
        {},
    )


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """One bernoulli group at the expected rate."""
    return [{"family": "bernoulli", "p": _rate(q, "p")}]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    p0 = _rate(q, "p_null")
    return [{"family": "bernoulli", "p": p0}], f"rate set to the reference rate ({p0:g})"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    p0 = _rate(q, "p_null")
    room = 1.0 - p0 if rule.direction > 0 else p0
    return EffectAxis(p0, rule.direction, room)


def implied_fields(q: dict, arms: list[dict]) -> dict:
    if arms and arms[0]["family"] == "bernoulli":
        return {"fields": {"p": arms[0]["p"]}}
    return {"fields": {}}


SIMULATION = SimulationModel(
    data_keys=("group",),
    default_data=default_data,
    null_data=null_data,
    kernels={"exact_binomial": "binomial_exact", "z_test": "binomial_z"},
    effect_axis=effect_axis,
    check_models=bernoulli_only,
    settings=lambda q: {"p_null": _rate(q, "p_null")},
    implied_fields=implied_fields,
    min_size=1,
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "p")
    return "the response rate" if value is None else f"a response rate of {fmt(value)}"


def assumptions_sentence(q: dict) -> str:
    p0 = values(q, FIELDS).get("p_null")
    return "" if p0 is None else f"a reference rate of {fmt(p0)}"


def exact_search_sentence(record: dict, size, larger: str = "n", every: str = "n") -> str:
    """The saw-tooth's two sizes in words (an exact sample-size answer only), else ''.

    ``size`` formats a size ("n = 59", "59 pairs"); ``larger`` and ``every`` name the sizes
    checked ("every larger n checked", "every size checked")."""
    block = ((record.get("sample_size") or {}).get("details") or {}).get("exact_search")
    if not block:
        return ""
    first, stays = block["first_reaching"], block["stays_above_from"]
    if first == stays:
        return (
            f" The exact test's power first reaches the target at {size(first)} and stays at or "
            f"above it for every larger {larger} checked (through {block['checked_through']})."
        )
    return (
        f" The exact test's power curve is saw-toothed: it first reaches the target at "
        f"{size(first)}, but falls below it again at some larger sizes; from {size(stays)} on, "
        f"every {every} checked (through {block['checked_through']}) reaches it. The answer is "
        f"the conservative {size(stays)}."
    )


def details_sentence(record: dict) -> str:
    """The saw-tooth's two n's in words (an exact sample-size answer only), else ''."""
    return exact_search_sentence(record, lambda n: f"n = {n}")


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    if v.get("p") is None or v.get("p_null") is None:
        return None
    return float(v["p"]) - float(v["p_null"])


DESIGN = Design(
    outcome="binary",
    layout="single_group",
    label="Binary outcome, single group",
    fields=FIELDS,
    forms=FORMS,
    solved="p",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: (
        "wilson_interval" if hypothesis(q)[0] == "estimation" else "exact_binomial"
    ),
    groups=one_group,
    allocation=one_group_allocation,
    derive=lambda q: {},
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=warnings_for,
    simulation=SIMULATION,
    phrases=Phrases(
        effect=effect_sentence,
        assumptions=assumptions_sentence,
        details=details_sentence,
        estimand=lambda q: f"the response rate, planned at {fmt(_rate(q, 'p'))}",
    ),
    example="northbridge_smoking_cessation_rate.json",
    contrast=_contrast,
    null_effect=lambda q: values(q, FIELDS).get("p_null"),
    estimation=Estimation(
        forms=(("p",),),
        precision=interval_precision,
        expected_words="when the observed proportion equals the planned one",
    ),
)
