"""Diagnostic accuracy, single group: sensitivity and specificity estimated to a given precision
at an expected prevalence (Buderer 1996, Acad Emerg Med 3:895). A precision question only
(``hypothesis.aim = "estimation"``): one consecutive sample, tested against the reference
standard, is large enough when the Wald intervals for sensitivity (among the expected cases)
and for specificity (among the expected non-cases) both have half-width at most
``hypothesis.half_width``. The math is ``engine/diagnostic_precision.py``.
"""

from __future__ import annotations

from .. import diagnostic_precision
from ..errors import QuestionError
from .base import Analysis, Design, Estimation, Field, Phrases, Solution
from .common import (
    analytic_method,
    checked_analysis,
    estimation_validate,
    fmt,
    no_warnings,
    number,
    one_group,
    one_group_allocation,
    values,
)

_RATE = {"minimum": 0, "maximum": 1, "exclusive_minimum": True, "exclusive_maximum": True}
FIELDS = (
    Field(
        "sensitivity",
        "effect",
        "number",
        "Expected sensitivity of the test: the proportion of cases it detects (a planning value).",
        "expected sensitivity",
        unit="proportion",
        **_RATE,
    ),
    Field(
        "specificity",
        "effect",
        "number",
        "Expected specificity of the test: the proportion of non-cases it clears (a planning "
        "value).",
        "expected specificity",
        unit="proportion",
        **_RATE,
    ),
    Field(
        "prevalence",
        "assumptions",
        "number",
        "Expected prevalence of the condition in the sample tested.",
        "expected prevalence",
        unit="proportion",
        **_RATE,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = (("sensitivity", "specificity", "prevalence"),)
ANALYSES = (
    Analysis(
        "buderer",
        "Wald confidence intervals for sensitivity and specificity",
        ("analytic",),
        ("estimation",),
        "Buderer 1996, Acad Emerg Med 3:895",
    ),
)


def validate(blocks: dict, find: str, from_data: bool) -> dict[str, list[str]]:
    """Only precision questions: the estimation forms decide (see ``estimation_validate``)."""
    return estimation_validate(DESIGN, blocks)


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def _planned(q: dict) -> tuple[float, float, float]:
    return (
        number(q, FIELDS, "sensitivity"),
        number(q, FIELDS, "specificity"),
        number(q, FIELDS, "prevalence"),
    )


def _hypothesis(q: dict) -> tuple[float | None, float]:
    h = q.get("hypothesis") or {}
    return h.get("half_width"), float(h.get("confidence") or 0.95)


def buderer(q: dict) -> dict:
    """Buderer's parts at the question's half-width: cases, non-cases, both n's, the answer."""
    half_width, confidence = _hypothesis(q)
    if half_width is None:
        return {}
    se, sp, prev = _planned(q)
    return diagnostic_precision.buderer_n(se, sp, prev, float(half_width), confidence)


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded subjects: the larger of Buderer's n for sensitivity and specificity."""
    _check(q)
    parts = buderer(q)
    if not parts:
        raise QuestionError("hypothesis.half_width", "is required for find = sample_size")
    return Solution(per_group=[parts["n"]], details={"buderer": parts})


def _not_a_test(*_args) -> float:
    raise QuestionError(
        "hypothesis.aim",
        f"{DESIGN.cell} answers precision questions only: set hypothesis.aim to estimation",
    )


def interval_precision(q: dict, per_group: list[float]) -> dict:
    """Both Wald half-widths at n subjects; the record's expected half-width is the larger."""
    se, sp, prev = _planned(q)
    _, confidence = _hypothesis(q)
    n = float(per_group[0])
    widths = diagnostic_precision.buderer_half_widths(n, se, sp, prev, confidence)
    # the same tie rule as Buderer's governing n (n_sens ≥ n_spec ⇔ the sensitivity's width ≥)
    wider = "sensitivity" if widths["sensitivity"] >= widths["specificity"] else "specificity"
    return {
        "half_width_expected": max(widths.values()),
        "half_width_assured": None,
        "probability": None,
        "intervals": [
            {
                "estimand": "sensitivity",
                "half_width_expected": widths["sensitivity"],
                "expected_subjects": n * prev,
                "subjects": "cases",
            },
            {
                "estimand": "specificity",
                "half_width_expected": widths["specificity"],
                "expected_subjects": n * (1 - prev),
                "subjects": "non-cases",
            },
        ],
        "wider": wider,
        "basis": (
            f"for the wider of the two intervals (sensitivity ±{widths['sensitivity']:.4f} among "
            f"the expected {fmt(round(n * prev, 2))} cases, specificity "
            f"±{widths['specificity']:.4f} among the expected {fmt(round(n * (1 - prev), 2))} "
            "non-cases), when the observed proportions equal the planned ones"
        ),
    }


def derive(q: dict) -> dict:
    """Buderer's parts (with a target half-width): the cases and non-cases each interval needs,
    the subjects for each, and which one governs."""
    parts = buderer(q)
    if not parts:
        return {}
    return {
        "cases_needed": parts["cases"],
        "non_cases_needed": parts["non_cases"],
        "subjects_for_sensitivity": parts["n_sensitivity"],
        "subjects_for_specificity": parts["n_specificity"],
        "governed_by": parts["governed_by"],
    }


def describe(q: dict) -> dict:
    _check(q)
    return analytic_method(
        "buderer",
        DESIGN.analysis("buderer").label,
        "Wald intervals at the expected numbers of cases and non-cases",
        "Buderer (1996), Acad Emerg Med 3:895",
        [
            "n for sensitivity = z²·Se(1 − Se)/(E²·prevalence); n for specificity = "
            "z²·Sp(1 − Sp)/(E²·(1 − prevalence)); the answer is the larger, so both intervals "
            "are at most E wide on each side.",
            "The numbers of cases and non-cases are the expected ones at the stated "
            "prevalence; the sample actually recruited may hold fewer cases.",
        ],
        derive(q),
    )


def estimand_sentence(q: dict) -> str:
    se, sp, prev = (values(q, FIELDS).get(k) for k in ("sensitivity", "specificity", "prevalence"))
    return (
        f"the sensitivity and the specificity of the test, planned at {fmt(se)} and {fmt(sp)}, "
        f"at an expected prevalence of {fmt(prev)}"
    )


def interval_words(q: dict) -> str:
    """The two intervals in words, each with the target half-width (``Estimation``)."""
    hyp = q["hypothesis"]
    text = (
        f"two two-sided {100 * float(hyp['confidence']):.4g}% confidence intervals, one for the "
        "sensitivity (among the cases) and one for the specificity (among the non-cases)"
    )
    if hyp.get("half_width") is None:
        return text
    return (
        f"{text}, each with a half-width of at most {fmt(hyp['half_width'])} when the observed "
        "proportions equal the planned ones"
    )


def precision_words(record: dict) -> str:
    """Each interval's half-width at the size, and which one is wider and sets the size."""
    p, q = record["precision"], record["question"]
    where = "At the analyzed size" if q["find"] == "sample_size" else "At this size"
    first, second = p["intervals"]

    def among(i: dict) -> str:
        return f"among the expected {fmt(round(i['expected_subjects'], 1))} {i['subjects']}"

    text = (
        f" {where} the {first['estimand']} interval's half-width is "
        f"{fmt(first['half_width_expected'])} ({among(first)}) and the {second['estimand']} "
        f"interval's is {fmt(second['half_width_expected'])} ({among(second)}), when the "
        "observed proportions equal the planned ones."
    )
    wider = p["wider"]
    other = second["estimand"] if wider == first["estimand"] else first["estimand"]
    alone = ((record.get("method") or {}).get("derived") or {}).get(f"subjects_for_{other}")
    if q["find"] == "sample_size" and alone is not None:
        return text + (
            f" The {wider} interval is the wider of the two and sets the sample size; the "
            f"{other} interval alone would need {float(alone):.2f} participants (unrounded)."
        )
    return text + f" The {wider} interval is the wider of the two."


def effect_sentence(q: dict, record: dict | None) -> str:
    v = values(q, FIELDS)
    return (
        f"a sensitivity of {fmt(v.get('sensitivity', 0))} and a specificity of "
        f"{fmt(v.get('specificity', 0))}"
    )


def assumptions_sentence(q: dict) -> str:
    p = values(q, FIELDS).get("prevalence")
    return "" if p is None else f"an expected prevalence of {fmt(p)}"


DESIGN = Design(
    outcome="diagnostic",
    layout="single_group",
    label="Diagnostic accuracy, single group (sensitivity and specificity)",
    fields=FIELDS,
    forms=FORMS,
    solved="sensitivity",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "buderer",
    groups=one_group,
    allocation=one_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=_not_a_test,
    solve_effect=_not_a_test,
    describe=describe,
    warnings_for=no_warnings,
    simulation=None,
    phrases=Phrases(
        effect=effect_sentence, assumptions=assumptions_sentence, estimand=estimand_sentence
    ),
    example="northbridge_chest_pain_rule_accuracy.json",
    contrast=lambda q: None,
    null_effect=lambda q: None,
    directional=False,
    estimation=Estimation(
        forms=FORMS,
        precision=interval_precision,
        expected_words="for both sensitivity and specificity when the observed proportions "
        "equal the planned ones",
        interval_words=interval_words,
        precision_words=precision_words,
    ),
)
