"""Binary outcome, logistic regression: the Wald test of one covariate's coefficient (Hsieh,
Bloch & Larsen 1998, Stat Med 17:1623).

A continuous (normal) covariate: n = (z_α + z_β)² / (P(1 − P)·β²), β the log odds ratio per SD
of the covariate and P the event rate at the covariate's mean. A binary covariate with
prevalence B: n = [z_α·√(P(1 − P)/B) + z_β·√(P₁(1 − P₁) + P₂(1 − P₂)(1 − B)/B)]² /
((P₁ − P₂)²(1 − B)), P₁ the event rate without the factor, P₂ with it (from the odds ratio) and
P = (1 − B)·P₁ + B·P₂. With other covariates in the model both are divided by 1 − R², R² that of
the tested covariate regressed on the others (the variance inflation).
"""

from __future__ import annotations

import math

from scipy import special

from ..errors import QuestionError
from ..quantiles import normal_effect, normal_power, power_unreachable, root, z, z_alpha, z_sum
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

_RATE = {"minimum": 0, "maximum": 1, "exclusive_minimum": True, "exclusive_maximum": True}
FIELDS = (
    Field(
        "odds_ratio",
        "effect",
        "number",
        "Odds ratio of the event per SD of a continuous covariate, or with against without a "
        "binary covariate.",
        "odds ratio",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "event_rate",
        "assumptions",
        "number",
        "Event rate at the mean of a continuous covariate (given alone: the covariate is "
        "continuous and normal).",
        "event rate at the covariate mean",
        unit="proportion",
        **_RATE,
    ),
    Field(
        "reference_event_rate",
        "assumptions",
        "number",
        "Event rate among those without a binary covariate (given with covariate_prevalence).",
        "event rate without the factor",
        unit="proportion",
        **_RATE,
    ),
    Field(
        "covariate_prevalence",
        "assumptions",
        "number",
        "Proportion of subjects with a binary covariate (given with reference_event_rate).",
        "prevalence of the factor",
        unit="proportion",
        **_RATE,
    ),
    Field(
        "r2_covariates",
        "assumptions",
        "number",
        "R² of the tested covariate regressed on the other covariates (the variance inflation "
        "is 1/(1 − R²)).",
        "R² of the tested covariate on the other covariates",
        default=0.0,
        minimum=0,
        maximum=1,
        exclusive_maximum=True,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = (
    ("event_rate",),
    ("reference_event_rate", "covariate_prevalence"),
)
ANALYSES = (
    Analysis(
        "logistic_wald",
        "Wald test of a logistic regression coefficient",
        ("analytic", "simulation"),
        ("superiority",),
        "Hsieh, Bloch & Larsen 1998; simulation: maximum likelihood by Newton–Raphson",
    ),
)


def _rules(errors: dict, v: dict, find: str, from_data: bool) -> None:
    if v.get("odds_ratio") is not None and float(v["odds_ratio"]) == 1:
        errors.setdefault("effect.odds_ratio", []).append("must differ from 1; got 1")


validate = make_validate(FIELDS, FORMS, "odds_ratio", rules=_rules)


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def _binary(q: dict) -> bool:
    return values(q, FIELDS).get("covariate_prevalence") is not None


def _keep(q: dict) -> float:
    return 1.0 - number(q, FIELDS, "r2_covariates")


def _with_factor(p1: float, odds_ratio: float) -> float:
    odds = p1 / (1.0 - p1) * odds_ratio
    return odds / (1.0 + odds)


def derive(q: dict) -> dict:
    """The variance inflation; for a binary covariate the event rate with the factor and
    overall."""
    v = values(q, FIELDS)
    out = {"variance_inflation": 1.0 / (1.0 - float(v.get("r2_covariates") or 0.0))}
    if _binary(q) and v.get("odds_ratio") and v.get("reference_event_rate"):
        p1, b = float(v["reference_event_rate"]), float(v["covariate_prevalence"])
        p2 = _with_factor(p1, float(v["odds_ratio"]))
        out.update(event_rate_with_factor=p2, overall_event_rate=(1 - b) * p1 + b * p2)
    return out


def _binary_parts(q: dict, odds_ratio: float) -> tuple[float, float, float]:
    """(null SD term, alternative SD term, |P₁ − P₂|·√(1 − B)) of the binary-covariate formula."""
    p1 = number(q, FIELDS, "reference_event_rate")
    b = number(q, FIELDS, "covariate_prevalence")
    p2 = _with_factor(p1, odds_ratio)
    p = (1 - b) * p1 + b * p2
    null = math.sqrt(p * (1 - p) / b)
    alt = math.sqrt(p1 * (1 - p1) + p2 * (1 - p2) * (1 - b) / b)
    return null, alt, abs(p1 - p2) * math.sqrt(1 - b)


def _odds_ratio(q: dict) -> float:
    value = number(q, FIELDS, "odds_ratio")
    if value == 1:
        raise QuestionError("effect.odds_ratio", "must differ from 1; got 1")
    return value


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded number of subjects (Hsieh, Bloch & Larsen 1998: normal or binary covariate)."""
    _check(q)
    odds_ratio, keep = _odds_ratio(q), _keep(q)
    target = float(q["target_power"])
    if _binary(q):
        null, alt, gap = _binary_parts(q, odds_ratio)
        n = (z_alpha(alpha, tails(q)) * null + z(target) * alt) ** 2 / gap**2
    else:
        p = number(q, FIELDS, "event_rate")
        n = z_sum(alpha, tails(q), target) ** 2 / (p * (1 - p) * math.log(odds_ratio) ** 2)
    return Solution(per_group=[n / keep])


def _power_at(q: dict, odds_ratio: float, n: float, alpha: float) -> float:
    n_eff = n * _keep(q)
    z_a = z_alpha(alpha, tails(q))
    if _binary(q):
        null, alt, gap = _binary_parts(q, odds_ratio)
        # one tail: the formula inverted, z_β = (√n·gap − z_α·null)/alt
        return float(special.ndtr((math.sqrt(n_eff) * gap - z_a * null) / alt))
    p = number(q, FIELDS, "event_rate")
    shift = math.sqrt(n_eff * p * (1 - p)) * abs(math.log(odds_ratio))
    return normal_power(shift, z_a, tails(q))


def _n(per_group: list[float]) -> float:
    n = float(per_group[0])
    if not n > 0:
        raise QuestionError("sample_size.per_group", f"must be greater than 0; got {n:g}")
    return n


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the power at n subjects."""
    _check(q)
    return _power_at(q, _odds_ratio(q), _n(per_group), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the odds ratio nearest 1 (above 1 unless lower is better) reaching the target."""
    _check(q)
    n, target = _n(per_group), float(q["target_power"])
    sign = 1.0 if hypothesis(q)[2] else -1.0
    if _binary(q):
        f = lambda x: _power_at(q, math.exp(sign * x), n, alpha) - target  # noqa: E731
        if f(20.0) < 0:
            raise power_unreachable("sample_size.per_group", target, per_group)
        x = root(f, 1e-9, 20.0)
    else:
        p = number(q, FIELDS, "event_rate")
        unit = math.sqrt(n * _keep(q) * p * (1 - p))
        x = normal_effect(unit, z_alpha(alpha, tails(q)), tails(q), target, 50.0)
    return {"field": "odds_ratio", "value": math.exp(sign * x)}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    _check(q)
    form = (
        "binary covariate: two proportions, variance under the null from the overall rate"
        if _binary(q)
        else "continuous normal covariate: n = (z_α + z_β)²/(P(1 − P)·β²)"
    )
    return analytic_method(
        "logistic_wald",
        DESIGN.analysis("logistic_wald").label,
        f"normal approximation ({form})",
        "Hsieh, Bloch & Larsen (1998), Stat Med 17:1623",
        [
            "The size with one covariate is divided by 1 − R², R² that of the tested covariate "
            "on the other covariates (the variance inflation).",
            "The formulas use the variance of the estimate near an odds ratio of 1; for strong "
            "effects they are approximations (a simulation fits the logistic model itself).",
        ],
        derive(q),
    )


# --- simulation -------------------------------------------------------------------------------


def _logit(p: float) -> float:
    return math.log(p / (1.0 - p))


def _model(q: dict, log_odds_ratio: float) -> dict:
    rho = math.sqrt(number(q, FIELDS, "r2_covariates"))
    if _binary(q):
        return {
            "family": "logistic_regression",
            "covariate": "binary",
            "prevalence": number(q, FIELDS, "covariate_prevalence"),
            "intercept": _logit(number(q, FIELDS, "reference_event_rate")),
            "log_odds_ratio": log_odds_ratio,
            "correlation": rho,
        }
    return {
        "family": "logistic_regression",
        "covariate": "continuous",
        "intercept": _logit(number(q, FIELDS, "event_rate")),
        "log_odds_ratio": log_odds_ratio,
        "correlation": rho,
    }


def default_data(q: dict) -> list[dict]:
    """The covariate (standard normal, or a factor with the stated prevalence), an other
    covariate correlated √R² with it when R² > 0, and logistic events."""
    return [_model(q, math.log(_odds_ratio(q)))]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    return [
        {**arms[0], "log_odds_ratio": 0.0}
    ], "the tested coefficient set to 0 (odds ratio 1), the intercept kept"


def approximate_n(plan, target: float) -> float | None:
    m = plan.models[0]
    if m["log_odds_ratio"] == 0:
        return None
    z_total = z_alpha(plan.alpha, plan.rule.tails) + z(target)
    p = 1.0 / (1.0 + math.exp(-m["intercept"]))
    if m["covariate"] == "binary":
        b = m["prevalence"]
        p2 = _with_factor(p, math.exp(m["log_odds_ratio"]))
        var = 1.0 / (p * (1 - p) * (1 - b)) + 1.0 / (p2 * (1 - p2) * b)
        n = z_total**2 * var / m["log_odds_ratio"] ** 2
    else:
        n = z_total**2 / (p * (1 - p) * m["log_odds_ratio"] ** 2)
    return n / (1.0 - m["correlation"] ** 2)


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    return EffectAxis(1.0, rule.direction, math.inf if rule.direction > 0 else 1.0)


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"logistic_wald": "logistic_wald"},
    effect_axis=effect_axis,
    data_block=lambda arms, labels, settings: {"regression": dict(arms[0])},
    implied_contrast=lambda arms: arms[0]["log_odds_ratio"],
    approximate_n=approximate_n,
    min_size=10,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    v = values(q, FIELDS)
    value = v.get("odds_ratio")
    if value is None and record and record.get("effect"):
        value = record["effect"]["value"]
    per = "with against without the factor" if _binary(q) else "per SD of the covariate"
    return "the odds ratio" if value is None else f"an odds ratio of {fmt(value)} {per}"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    r2 = float(v.get("r2_covariates") or 0.0)
    if _binary(q):
        text = (
            f"an event rate of {fmt(v.get('reference_event_rate', 0))} without the factor and "
            f"a prevalence of the factor of {fmt(v['covariate_prevalence'])}"
        )
    else:
        text = f"an event rate of {fmt(v.get('event_rate', 0))} at the covariate mean"
    return text + f", R² of {fmt(r2)} of the covariate on the other covariates"


def _contrast(q: dict) -> float | None:
    value = values(q, FIELDS).get("odds_ratio")
    return None if value is None or value <= 0 else math.log(float(value))


DESIGN = Design(
    outcome="binary",
    layout="regression",
    label="Binary outcome, logistic regression",
    fields=FIELDS,
    forms=FORMS,
    solved="odds_ratio",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "logistic_wald",
    groups=one_group,
    allocation=one_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_delirium_logistic.json",
    contrast=_contrast,
    null_effect=lambda q: 1.0,
)
