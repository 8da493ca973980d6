"""Time to event, Cox regression: the test of one covariate's coefficient in a proportional
hazards model (Hsieh & Lavori 2000, Control Clin Trials 21:552).

The events needed are D = (z_α + z_β)² / (σ²·(ln HR)²·(1 − R²)), σ the covariate's SD (for a
binary covariate with prevalence B, σ² = B(1 − B), which gives Schoenfeld's formula), HR the
hazard ratio per unit of the covariate and R² that of the covariate regressed on the other
covariates. Events drive the answer: the subjects are the whole events over the probability
of an event during the study.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from ..errors import QuestionError
from ..quantiles import normal_effect, normal_power, z, z_alpha, z_sum
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

_EPS = 1e-9
_RATE = {"minimum": 0, "maximum": 1, "exclusive_minimum": True, "exclusive_maximum": True}
FIELDS = (
    Field(
        "hazard_ratio",
        "effect",
        "number",
        "Hazard ratio per one-unit increase of the covariate (per SD when sd_covariate is 1), "
        "or with against without a binary covariate.",
        "hazard ratio",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "sd_covariate",
        "assumptions",
        "number",
        "Standard deviation of a continuous covariate, in the units the hazard ratio is per.",
        "covariate standard deviation",
        unit="covariate units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "covariate_prevalence",
        "assumptions",
        "number",
        "Proportion of subjects with a binary covariate.",
        "prevalence of the factor",
        unit="proportion",
        **_RATE,
    ),
    Field(
        "event_probability",
        "assumptions",
        "number",
        "Probability that a subject has the event during the study (events ÷ subjects).",
        "probability of an event",
        unit="proportion",
        minimum=0,
        maximum=1,
        exclusive_minimum=True,
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
    ("sd_covariate", "event_probability"),
    ("covariate_prevalence", "event_probability"),
)
ANALYSES = (
    Analysis(
        "cox_wald",
        "test of a Cox regression coefficient",
        ("analytic", "simulation"),
        ("superiority",),
        "Hsieh & Lavori 2000; simulation: partial likelihood by Newton–Raphson",
    ),
)


def _rules(errors: dict, v: dict, find: str, from_data: bool) -> None:
    if v.get("hazard_ratio") is not None and float(v["hazard_ratio"]) == 1:
        errors.setdefault("effect.hazard_ratio", []).append("must differ from 1; got 1")


validate = make_validate(FIELDS, FORMS, "hazard_ratio", rules=_rules)


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def covariate_variance(q: dict) -> float:
    """σ² of the covariate: sd² (continuous) or B(1 − B) (binary)."""
    if values(q, FIELDS).get("covariate_prevalence") is not None:
        b = number(q, FIELDS, "covariate_prevalence")
        return b * (1.0 - b)
    return number(q, FIELDS, "sd_covariate") ** 2


def _information(q: dict) -> float:
    """σ²·(1 − R²): the information per event about ln HR."""
    return covariate_variance(q) * (1.0 - number(q, FIELDS, "r2_covariates"))


def _log_hr(q: dict) -> float:
    hr = number(q, FIELDS, "hazard_ratio")
    if hr == 1:
        raise QuestionError("effect.hazard_ratio", "must differ from 1; got 1")
    return math.log(hr)


def derive(q: dict) -> dict:
    v = values(q, FIELDS)
    out = {"variance_inflation": 1.0 / (1.0 - float(v.get("r2_covariates") or 0.0))}
    if v.get("covariate_prevalence") is not None or v.get("sd_covariate") is not None:
        out["covariate_variance"] = covariate_variance(q)
    return out


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded subjects: the whole events D over P(event)."""
    _check(q)
    p = number(q, FIELDS, "event_probability")
    raw = z_sum(alpha, tails(q), float(q["target_power"])) ** 2 / (
        _information(q) * _log_hr(q) ** 2
    )
    required = int(math.ceil(raw - _EPS))
    return Solution(
        per_group=[required / p],
        details={"events": {"required": required, "raw": raw, "probability": {"mean": p}}},
    )


def _n(per_group: list[float]) -> float:
    n = float(per_group[0])
    if not n > 0:
        raise QuestionError("sample_size.per_group", f"must be greater than 0; got {n:g}")
    return n


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the power from the expected events n·P(event)."""
    _check(q)
    events = _n(per_group) * number(q, FIELDS, "event_probability")
    shift = math.sqrt(events * _information(q)) * abs(_log_hr(q))
    return normal_power(shift, z_alpha(alpha, tails(q)), tails(q))


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the hazard ratio nearest 1 (below 1 unless lower is worse) reaching the target."""
    _check(q)
    events = _n(per_group) * number(q, FIELDS, "event_probability")
    x = normal_effect(
        math.sqrt(events * _information(q)),
        z_alpha(alpha, tails(q)),
        tails(q),
        float(q["target_power"]),
        50.0,
    )
    # higher is better: longer times, a hazard ratio below 1
    return {"field": "hazard_ratio", "value": math.exp(-x if hypothesis(q)[2] else x)}


def describe(q: dict) -> dict:
    _check(q)
    return analytic_method(
        "cox_wald",
        DESIGN.analysis("cox_wald").label,
        "normal approximation: D = (z_α + z_β)²/(σ²·(ln HR)²·(1 − R²)) events",
        "Hsieh & Lavori (2000), Control Clin Trials 21:552",
        [
            "Events drive the answer: the subjects are the whole events required over the "
            "probability of an event during the study.",
            "For a binary covariate σ² = B(1 − B); with B = 0.5 this is Schoenfeld's (1983) "
            "events formula for two equal groups.",
            "The size with one covariate is multiplied by 1/(1 − R²), R² that of the tested "
            "covariate on the other covariates (the variance inflation).",
        ],
        derive(q),
    )


# --- simulation -------------------------------------------------------------------------------


def _event_share(model: dict, tau: float) -> float:
    """P(event by τ) with hazard exp(β·x) over the covariate's distribution."""
    beta = model["log_hazard_ratio"]
    if model["covariate"] == "binary":
        b = model["prevalence"]
        return (1 - b) * (1 - math.exp(-tau)) + b * (1 - math.exp(-tau * math.exp(beta)))
    nodes, weights = np.polynomial.hermite_e.hermegauss(60)
    rate = np.exp(beta * model["sd"] * nodes)
    return float(np.sum(weights * (1 - np.exp(-tau * rate))) / math.sqrt(2 * math.pi))


def _model(q: dict, log_hr: float) -> dict:
    v = values(q, FIELDS)
    model = {
        "family": "cox_regression",
        "log_hazard_ratio": log_hr,
        "correlation": math.sqrt(number(q, FIELDS, "r2_covariates")),
    }
    if v.get("covariate_prevalence") is not None:
        model.update(covariate="binary", prevalence=number(q, FIELDS, "covariate_prevalence"))
    else:
        model.update(covariate="continuous", sd=number(q, FIELDS, "sd_covariate"))
    p = number(q, FIELDS, "event_probability")
    if p >= 1:
        raise QuestionError(
            "assumptions.event_probability", "must be below 1 to be simulated; got 1"
        )
    tau = math.exp(
        optimize.brentq(lambda u: _event_share(model, math.exp(u)) - p, -40.0, 40.0, xtol=1e-12)
    )
    return {**model, "censor_time": tau}


def default_data(q: dict) -> list[dict]:
    """The covariate, an other covariate correlated √R² with it when R² > 0, exponential event
    times with hazard exp(β·x) and a common follow-up time giving P(event)."""
    return [_model(q, _log_hr(q))]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    return [
        {**arms[0], "log_hazard_ratio": 0.0}
    ], "the tested coefficient set to 0 (hazard ratio 1), the follow-up time kept"


def approximate_n(plan, target: float) -> float | None:
    m = plan.models[0]
    if m["log_hazard_ratio"] == 0:
        return None
    z_total = z_alpha(plan.alpha, plan.rule.tails) + z(target)
    var = m["prevalence"] * (1 - m["prevalence"]) if m["covariate"] == "binary" else m["sd"] ** 2
    events = z_total**2 / (var * m["log_hazard_ratio"] ** 2 * (1 - m["correlation"] ** 2))
    return events / _event_share(m, m["censor_time"])


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    # "higher" is longer times: a hazard ratio below 1
    return EffectAxis(1.0, -rule.direction, 1.0 if rule.direction > 0 else math.inf)


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"cox_wald": "cox_wald"},
    effect_axis=effect_axis,
    data_block=lambda arms, labels, settings: {"regression": dict(arms[0])},
    implied_contrast=lambda arms: -arms[0]["log_hazard_ratio"],
    approximate_n=approximate_n,
    min_size=10,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    v = values(q, FIELDS)
    hr = v.get("hazard_ratio")
    if hr is None and record and record.get("effect"):
        hr = record["effect"]["value"]
    per = (
        "with against without the factor"
        if v.get("covariate_prevalence") is not None
        else "per unit of the covariate"
    )
    return "the hazard ratio" if hr is None else f"a hazard ratio of {fmt(hr)} {per}"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("covariate_prevalence") is not None:
        text = f"a prevalence of the factor of {fmt(v['covariate_prevalence'])}"
    else:
        text = f"a covariate SD of {fmt(v.get('sd_covariate', 0))}"
    return (
        f"{text}, a probability of an event of {fmt(v.get('event_probability', 0))}, R² of "
        f"{fmt(float(v.get('r2_covariates') or 0.0))} of the covariate on the other covariates"
    )


def _contrast(q: dict) -> float | None:
    hr = values(q, FIELDS).get("hazard_ratio")
    return None if hr is None or hr <= 0 else -math.log(float(hr))


DESIGN = Design(
    outcome="time_to_event",
    layout="regression",
    label="Time to event, Cox regression",
    fields=FIELDS,
    forms=FORMS,
    solved="hazard_ratio",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "cox_wald",
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
    example="northbridge_sepsis_cox.json",
    contrast=_contrast,
    null_effect=lambda q: 1.0,
)
