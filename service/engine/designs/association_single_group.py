"""Association, single group: a Pearson correlation against a null value, by Fisher's z."""

from __future__ import annotations

import math

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
    analytic_method,
    checked_analysis,
    fmt,
    hypothesis,
    make_validate,
    no_warnings,
    number,
    one_group,
    one_group_allocation,
    tails,
    values,
)

_CORRELATION = {"minimum": -1, "maximum": 1, "exclusive_minimum": True, "exclusive_maximum": True}
FIELDS = (
    Field(
        "r",
        "effect",
        "number",
        "Expected Pearson correlation between the two measurements.",
        "correlation",
        **_CORRELATION,
    ),
    Field(
        "r_null",
        "assumptions",
        "number",
        "Correlation under the null hypothesis.",
        "null correlation",
        default=0.0,
        **_CORRELATION,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = ((),)
ANALYSES = (
    Analysis(
        "pearson",
        "test of the Pearson correlation (Fisher's z)",
        ("analytic", "simulation"),
        ("superiority",),
        "Fisher 1921; Cohen 1988, ch. 3",
    ),
)
validate = make_validate(FIELDS, FORMS, "r")


def _r(q: dict, name: str) -> float:
    return number(q, FIELDS, name)


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def _pairs(per_group: list[float]) -> float:
    """Return the number of pairs, checked to exceed 3 (Fisher z's variance is 1/(n − 3))."""
    n = float(per_group[0])
    if not n > 3:
        raise QuestionError(
            "sample_size.per_group", f"Fisher's z needs more than 3 pairs; got {n:g}"
        )
    return n


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded number of pairs, n = ((z_a + z_b) / |atanh r − atanh r_null|)² + 3."""
    _check(q)
    r, r_null = _r(q, "r"), _r(q, "r_null")
    if r == r_null:
        raise QuestionError("effect.r", f"must differ from r_null ({r_null:g}); got {r:g}")
    shift = abs(math.atanh(r) - math.atanh(r_null))
    n = (z_sum(alpha, tails(q), float(q["target_power"])) / shift) ** 2 + 3.0
    return Solution(per_group=[n], details={"fisher_z_difference": shift})


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the Fisher-z power at the given number of pairs (n > 3)."""
    _check(q)
    r, r_null = _r(q, "r"), _r(q, "r_null")
    n = _pairs(per_group)
    shift = abs(math.atanh(r) - math.atanh(r_null)) * math.sqrt(n - 3.0)
    return normal_power(shift, z_alpha(alpha, tails(q)), tails(q))


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the correlation nearest r_null (above it unless lower is better) reaching target."""
    _check(q)
    r_null = _r(q, "r_null")
    n = _pairs(per_group)
    target = float(q["target_power"])
    # Solve on the z scale (unbounded), then map back; the far tail keeps this a root search.
    x = normal_effect(math.sqrt(n - 3.0), z_alpha(alpha, tails(q)), tails(q), target, 50.0)
    higher = hypothesis(q)[2]
    value = math.tanh(math.atanh(r_null) + (x if higher else -x))
    if not -1.0 < value < 1.0:
        raise power_unreachable("sample_size.per_group", target, per_group)
    return {"field": "r", "value": value}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    _check(q)
    return analytic_method(
        "pearson",
        DESIGN.analysis("pearson").label,
        "Fisher z transformation, normal approximation",
        "Fisher (1921); Cohen (1988), ch. 3",
        [
            "atanh(r̂) is taken as normal with variance 1/(n − 3).",
            "For strong correlations Fisher z and Cohen's table part company: at r = 0.5 the "
            "formula gives 29.01 (30 rounded up) where Cohen (1988, Table 3.4.1) prints 28.",
        ],
        {},
    )


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Bivariate normal pairs with correlation r."""
    return [{"family": "bivariate_normal", "r": _r(q, "r")}]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    r_null = _r(q, "r_null")
    return [
        {"family": "bivariate_normal", "r": r_null}
    ], f"correlation set to the null value {r_null:g}"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    r_null = _r(q, "r_null")
    room = 1.0 - r_null if rule.direction > 0 else 1.0 + r_null
    return EffectAxis(r_null, rule.direction, room)


def approximate_n(plan, target: float) -> float | None:
    from ..approximate import correlation_first

    return correlation_first(plan, target)


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"pearson": "pearson"},
    effect_axis=effect_axis,
    settings=lambda q: {"r_null": _r(q, "r_null")},
    data_block=lambda arms, labels, settings: {"pairs": dict(arms[0])},
    implied_contrast=None,
    approximate_n=approximate_n,
    min_size=4,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    r = values(q, FIELDS).get("r")
    if r is None and record and record.get("effect"):
        r = record["effect"]["value"]
    return "the correlation" if r is None else f"a correlation of {fmt(r)}"


def assumptions_sentence(q: dict) -> str:
    r_null = values(q, FIELDS).get("r_null", 0.0)
    return f"a null correlation of {fmt(r_null)}" if r_null else ""


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    return None if v.get("r") is None else float(v["r"]) - float(v.get("r_null") or 0.0)


DESIGN = Design(
    outcome="association",
    layout="single_group",
    label="Association between two measurements, single group",
    fields=FIELDS,
    forms=FORMS,
    solved="r",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "pearson",
    groups=one_group,
    allocation=one_group_allocation,
    derive=lambda q: {},
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_grip_strength_correlation.json",
    contrast=_contrast,
    null_effect=lambda q: float(values(q, FIELDS).get("r_null") or 0.0),
)
