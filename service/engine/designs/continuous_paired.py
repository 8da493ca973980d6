"""Continuous outcome, paired: the one-sample t test on the within-pair differences; their SD is
posted directly or derived from a common SD and the within-pair correlation."""

from __future__ import annotations

import math

from .base import Field, Phrases
from .common import fmt, number, values
from .continuous_single_group import difference_sentence, t_cell

FIELDS = (
    Field(
        "difference",
        "effect",
        "number",
        "Expected mean of the within-pair differences.",
        "mean within-pair difference",
        unit="outcome units",
    ),
    Field(
        "sd_difference",
        "assumptions",
        "number",
        "Standard deviation of the within-pair differences.",
        "standard deviation of the differences",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "sd",
        "assumptions",
        "number",
        "Standard deviation of one measurement (given with the correlation).",
        "standard deviation of one measurement",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "correlation",
        "assumptions",
        "number",
        "Correlation between the two measurements of a pair.",
        "within-pair correlation",
        minimum=-1,
        maximum=1,
        exclusive_minimum=True,
        exclusive_maximum=True,
    ),
)


def sd_difference(q: dict) -> float:
    """The SD of the differences: posted, or σ·√(2(1 − ρ)) from a common SD and correlation."""
    v = values(q, FIELDS)
    if v.get("sd_difference") is not None or v.get("sd") is None:
        return number(q, FIELDS, "sd_difference")
    sd, rho = number(q, FIELDS, "sd"), number(q, FIELDS, "correlation")
    return sd * math.sqrt(2.0 * (1.0 - rho))


def derive(q: dict) -> dict:
    """The SD of the differences when the investigator gave a common SD and correlation."""
    v = values(q, FIELDS)
    if v.get("sd_difference") is None and v.get("sd") is not None:
        return {"sd_difference": sd_difference(q)}
    return {}


def _sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("sd_difference") is not None:
        return f"a standard deviation of the differences of {fmt(v['sd_difference'])}"
    if v.get("sd") is None:
        return ""
    return (
        f"a standard deviation of {fmt(v['sd'])} per measurement and a within-pair "
        f"correlation of {fmt(v['correlation'])}"
    )


def _implied_sd(sd: float | None) -> dict:
    return {"fields": {"sd_difference": sd}} if sd is not None else {"missing": ["sd_difference"]}


DESIGN = t_cell(
    outcome="continuous",
    layout="paired",
    label="Continuous outcome, paired",
    fields=FIELDS,
    forms=(("sd_difference",), ("sd", "correlation")),
    sd=sd_difference,
    derive=derive,
    model_fields=("difference", "sd_difference", "sd", "correlation"),
    data_key="differences",
    what="the within-pair differences",
    sd_note="The SD is that of the differences; from a common SD σ and within-pair "
    "correlation ρ it is σ·√(2(1 − ρ)).",
    approximation="noncentral t, paired differences",
    phrases=Phrases(
        effect=difference_sentence(FIELDS, "the mean of the within-pair differences"),
        assumptions=_sentence,
    ),
    example="northbridge_rehab_paired.json",
    implied_sd_fields=_implied_sd,
)
