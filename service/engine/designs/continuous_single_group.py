"""Continuous outcome, single group: the one-sample t test of a mean against a null value, exact
power by the noncentral t; the signed-rank test by simulation. The paired cell reuses this
machinery on the within-pair differences (``t_cell``)."""

from __future__ import annotations

import math
from collections.abc import Callable

from .. import models, precision
from ..errors import QuestionError
from ..quantiles import solve_effect_or_raise, solve_n_or_raise, t_power
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
    check_aim,
    fmt,
    hypothesis,
    make_validate,
    no_warnings,
    number,
    one_group,
    one_group_allocation,
    stated_effect,
    tails,
    values,
)

DIFFERENCE_HELP = "Expected true mean minus the null value."


T_INTERVAL = Analysis(
    "t_interval",
    "t confidence interval for the mean",
    ("analytic",),
    ("estimation",),
    "Kupper & Hafner 1989, Am Stat 43:101; half-width t·s/√n, E[s] = c4·σ, "
    "P(s ≤ bound) by the chi-square distribution",
)


def analyses(what: str, interval: bool = False) -> tuple[Analysis, ...]:
    """The t test (analytic and simulated) and the signed-rank test (simulated) on ``what``;
    with ``interval``, the t interval for a precision question."""
    return (*analyses_tests(what), *((T_INTERVAL,) if interval else ()))


def analyses_tests(what: str) -> tuple[Analysis, ...]:
    """The tests on ``what``: the t test and the signed-rank test."""
    return (
        Analysis(
            "t_test",
            f"t test on {what}",
            ("analytic", "simulation"),
            ("superiority",),
            "Cohen 1988, ch. 2; Guenther 1981; power by the noncentral t",
        ),
        Analysis(
            "signed_rank",
            "Wilcoxon signed-rank test",
            ("simulation",),
            ("superiority",),
            "Wilcoxon 1945; power by simulation",
        ),
    )


def t_cell(
    *,
    outcome: str,
    layout: str,
    label: str,
    fields: tuple[Field, ...],
    forms: tuple[tuple[str, ...], ...],
    sd: Callable[[dict], float],
    derive: Callable[[dict], dict],
    model_fields: tuple[str, ...],
    data_key: str,
    what: str,
    sd_note: str | None,
    approximation: str,
    phrases: Phrases,
    example: str,
    implied_sd_fields: Callable[[float | None], dict],
    interval: bool = False,
) -> Design:
    """Build a one-sample t cell whose SD is ``sd(q)`` and whose data are ``what``; with
    ``interval`` it also answers precision questions (the t interval for the mean)."""
    design: Design

    def _sd(q: dict) -> float:
        check_aim(q, design)
        analysis_of(q, design, "analytic")
        return sd(q)

    def _power_at(q: dict, delta: float, n: float, alpha: float) -> float:
        return t_power(abs(delta) * math.sqrt(n) / _sd(q), n - 1.0, alpha, tails(q))

    def interval_precision(q: dict, per_group: list[float]) -> dict:
        return precision.t_interval(q, _sd(q), per_group)

    def solve_n(q: dict, alpha: float) -> Solution:
        if hypothesis(q)[0] == "estimation":
            return precision.t_interval_solution(q, _sd(q), [1.0])
        delta = number(q, fields, "difference")
        _sd(q)
        if delta == 0:
            raise QuestionError("effect.difference", "must differ from 0; got 0")
        n = solve_n_or_raise(
            lambda n: _power_at(q, delta, n, alpha),
            float(q["target_power"]),
            1.5,
            field="effect.difference",
            value=delta,
        )
        return Solution(per_group=[n])

    def power(q: dict, per_group: list[float], alpha: float) -> float:
        return _power_at(q, number(q, fields, "difference"), float(per_group[0]), alpha)

    def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
        s = _sd(q)
        n = float(per_group[0])
        x = solve_effect_or_raise(
            lambda d: _power_at(q, d, n, alpha),
            float(q["target_power"]),
            per_group,
            hi=4.0 * s / math.sqrt(n),
        )
        return {"field": "difference", "value": x if hypothesis(q)[2] else -x}

    def describe(q: dict) -> dict:
        analysis = analysis_of(q, design, "analytic")
        if analysis == "t_interval":
            return analytic_method(
                analysis,
                T_INTERVAL.label,
                "t interval: expected half-width, or its probability by the chi-square "
                "distribution",
                "Kupper & Hafner (1989), Am Stat 43:101",
                [
                    f"Two-sided t interval for the mean of {what}: half-width t·s/√n with n − 1 "
                    "degrees of freedom.",
                    "Without an assurance the expected half-width, t·c4·SD/√n (E[s] = c4·SD), "
                    "is at most the target; with one, (n − 1)s²/SD² is chi-square on n − 1 "
                    "degrees of freedom and the half-width is at most the target with that "
                    "probability.",
                ],
                derive(q),
            )
        notes = [
            f"t test on {what} with n − 1 degrees of freedom; noncentrality difference·√n / SD.",
            "Power counts both rejection tails for a two-sided test; a one-sided test looks in "
            "the direction of the assumed difference.",
        ]
        if sd_note:
            notes.append(sd_note)
        return analytic_method(
            analysis,
            design.analysis(analysis).label,
            approximation,
            "Cohen (1988), ch. 2; Guenther (1981), Am Stat 35:243",
            notes,
            derive(q),
        )

    def default_data(q: dict) -> list[dict]:
        return [{"family": "normal", "mean": number(q, fields, "difference"), "sd": sd(q)}]

    def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
        return [
            models.shifted(arms[0], -models.center(arms[0]))
        ], f"{data_key} shifted to mean 0 (the null value), shape unchanged"

    def implied_fields(q: dict, arms: list[dict]) -> dict:
        m, v = models.moments(arms[0])
        out: dict = {"fields": {}, "missing": []}
        if m is not None:
            out["fields"]["difference"] = m
        else:
            out["missing"].append("difference")
        sd_fields = implied_sd_fields(None if v is None else math.sqrt(v))
        out["fields"].update(sd_fields.get("fields", {}))
        out["missing"] += sd_fields.get("missing", [])
        return out

    simulation = SimulationModel(
        data_keys=(data_key,),
        default_data=default_data,
        null_data=null_data,
        kernels={"t_test": "t_one_sample", "signed_rank": "signed_rank"},
        effect_axis=lambda q, rule: EffectAxis(0.0, rule.direction, math.inf),
        implied_contrast=lambda arms: models.center(arms[0]),
        implied_fields=implied_fields,
    )
    design = Design(
        outcome=outcome,
        layout=layout,
        label=label,
        fields=fields,
        forms=forms,
        solved="difference",
        analyses=analyses(what, interval),
        validate=make_validate(fields, forms, "difference", model_fields),
        default_analysis=lambda q: (
            "t_interval" if interval and hypothesis(q)[0] == "estimation" else "t_test"
        ),
        groups=one_group,
        allocation=one_group_allocation,
        derive=derive,
        solve_n=solve_n,
        power=power,
        solve_effect=solve_effect,
        describe=describe,
        warnings_for=no_warnings,
        simulation=simulation,
        phrases=phrases,
        example=example,
        sequential=True,
        contrast=lambda q: values(q, fields).get("difference"),
        null_effect=lambda q: 0.0,
        estimation=Estimation(
            forms=tuple(f for f in forms), precision=interval_precision, assurance=True
        )
        if interval
        else None,
    )
    return design


def difference_sentence(fields: tuple[Field, ...], tail: str):
    """The effect sentence of a one-sample cell: 'a mean difference of 3 (…)'."""

    def sentence(q: dict, record: dict | None) -> str:
        value = stated_effect(q, record, fields, "difference")
        if value is None:
            return f"the mean difference ({tail})"
        return f"a mean difference of {fmt(value)} ({tail})"

    return sentence


FIELDS = (
    Field(
        "difference",
        "effect",
        "number",
        DIFFERENCE_HELP,
        "difference from the null value",
        unit="outcome units",
    ),
    Field(
        "sd",
        "assumptions",
        "number",
        "Standard deviation of one observation.",
        "standard deviation",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
)


def _sd_sentence(q: dict) -> str:
    sd = values(q, FIELDS).get("sd")
    return "" if sd is None else f"a standard deviation of {fmt(sd)}"


def _implied_sd(sd: float | None) -> dict:
    return {"fields": {"sd": sd}} if sd is not None else {"missing": ["sd"]}


DESIGN = t_cell(
    outcome="continuous",
    layout="single_group",
    label="Continuous outcome, single group",
    fields=FIELDS,
    forms=(("sd",),),
    sd=lambda q: number(q, FIELDS, "sd"),
    derive=lambda q: {},
    model_fields=("difference", "sd"),
    data_key="group",
    what="one sample",
    sd_note=None,
    approximation="noncentral t, one sample",
    phrases=Phrases(
        effect=difference_sentence(FIELDS, "true mean minus the null value"),
        assumptions=_sd_sentence,
        estimand=lambda q: f"the mean, assuming {_sd_sentence(q)}",
    ),
    example="northbridge_vitamin_d_audit.json",
    implied_sd_fields=_implied_sd,
    interval=True,
)
