"""Sensitivity and specificity estimated to a given precision at an expected prevalence
(Buderer 1996, Acad Emerg Med 3:895). Pure math for the diagnostic × single_group cell, an
estimation (precision) question: the n whose Wald intervals for sensitivity and specificity
have half-width at most E.

n_sens = z²·Se(1 − Se)/(E²·prev): the cases needed (z²·Se(1 − Se)/E²) over the prevalence;
n_spec = z²·Sp(1 − Sp)/(E²·(1 − prev)); the answer is the larger. With a given n the expected
half-widths are z·√(Se(1 − Se)/(n·prev)) and z·√(Sp(1 − Sp)/(n·(1 − prev))).
"""

from __future__ import annotations

import math

from scipy import special

from .errors import QuestionError


def _z(confidence: float) -> float:
    if not 0.5 < confidence < 1:
        raise QuestionError(
            "hypothesis.confidence", f"must be between 0.5 and 1 (exclusive); got {confidence:g}"
        )
    return float(special.ndtri(0.5 + confidence / 2.0))


def _check(name: str, value: float) -> float:
    if not 0 < value < 1:
        raise QuestionError(name, f"must be between 0 and 1 (exclusive); got {value:g}")
    return float(value)


def buderer_n(
    sensitivity: float,
    specificity: float,
    prevalence: float,
    half_width: float,
    confidence: float = 0.95,
    *,
    fields: tuple[str, str, str] = (
        "effect.sensitivity",
        "effect.specificity",
        "assumptions.prevalence",
    ),
) -> dict:
    """Return the unrounded subjects for sensitivity and for specificity, and the answer.

    Keys: ``cases`` and ``non_cases`` (the subjects with and without the condition each
    interval needs), ``n_sensitivity``, ``n_specificity`` (those over the prevalence and
    1 − prevalence), ``n`` (the larger), ``governed_by`` ("sensitivity" | "specificity").
    """
    se = _check(fields[0], sensitivity)
    sp = _check(fields[1], specificity)
    prev = _check(fields[2], prevalence)
    if not half_width > 0:
        raise QuestionError("hypothesis.half_width", f"must be greater than 0; got {half_width:g}")
    z2 = _z(confidence) ** 2
    cases = z2 * se * (1 - se) / half_width**2
    non_cases = z2 * sp * (1 - sp) / half_width**2
    n_sens, n_spec = cases / prev, non_cases / (1 - prev)
    return {
        "cases": cases,
        "non_cases": non_cases,
        "n_sensitivity": n_sens,
        "n_specificity": n_spec,
        "n": max(n_sens, n_spec),
        "governed_by": "sensitivity" if n_sens >= n_spec else "specificity",
    }


def buderer_half_widths(
    n: float, sensitivity: float, specificity: float, prevalence: float, confidence: float = 0.95
) -> dict:
    """Return the expected Wald half-widths for sensitivity and specificity with n subjects."""
    if not n > 0:
        raise QuestionError("sample_size.per_group", f"must be greater than 0; got {n:g}")
    z = _z(confidence)
    se = _check("effect.sensitivity", sensitivity)
    sp = _check("effect.specificity", specificity)
    prev = _check("assumptions.prevalence", prevalence)
    return {
        "sensitivity": z * math.sqrt(se * (1 - se) / (n * prev)),
        "specificity": z * math.sqrt(sp * (1 - sp) / (n * (1 - prev))),
    }
