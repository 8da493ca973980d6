"""Sensitivity and specificity to a given precision (Buderer 1996, Acad Emerg Med 3:895):
the formula recomputed with scipy, and the resulting Wald intervals checked with statsmodels'
proportion_confint."""

from __future__ import annotations

import math

import pytest
from scipy import stats
from statsmodels.stats.proportion import proportion_confint

from service.engine.diagnostic_precision import buderer_half_widths, buderer_n
from service.engine.errors import QuestionError
from tests.posted import ACCURACY, posted, record_of


@pytest.mark.parametrize(
    ("se", "sp", "prev", "e", "governed"),
    [(0.9, 0.85, 0.1, 0.05, "sensitivity"), (0.8, 0.7, 0.6, 0.07, "specificity")],
)
def test_buderer_formula(se, sp, prev, e, governed):
    # formula: Buderer (1996): n_sens = z²·Se(1 − Se)/(E²·prev), n_spec = z²·Sp(1 − Sp)/
    # (E²·(1 − prev)), z = Φ⁻¹(0.975); the answer is the larger.
    z2 = stats.norm.ppf(0.975) ** 2
    n_sens = z2 * se * (1 - se) / (e**2 * prev)
    n_spec = z2 * sp * (1 - sp) / (e**2 * (1 - prev))
    out = buderer_n(se, sp, prev, e)
    assert out["n_sensitivity"] == pytest.approx(n_sens, rel=1e-12)
    assert out["n_specificity"] == pytest.approx(n_spec, rel=1e-12)
    assert out["n"] == pytest.approx(max(n_sens, n_spec), rel=1e-12)
    assert out["governed_by"] == governed


def test_the_intervals_at_the_answer_are_narrow_enough():
    # general-purpose library: statsmodels' Wald ("normal") interval for the sensitivity among
    # the expected cases, and for the specificity among the non-cases, at the rounded-up n.
    se, sp, prev, e = 0.9, 0.85, 0.1, 0.05
    n = math.ceil(buderer_n(se, sp, prev, e)["n"])
    cases, non_cases = n * prev, n * (1 - prev)
    lo, hi = proportion_confint(se * cases, cases, alpha=0.05, method="normal")
    assert (hi - lo) / 2 <= e + 1e-12
    lo, hi = proportion_confint(sp * non_cases, non_cases, alpha=0.05, method="normal")
    assert (hi - lo) / 2 <= e
    widths = buderer_half_widths(n, se, sp, prev)
    assert widths["sensitivity"] == pytest.approx(
        stats.norm.ppf(0.975) * math.sqrt(se * (1 - se) / cases)
    )
    assert widths["sensitivity"] <= e


def test_confidence_and_bad_input():
    # formula: a 90% interval uses z = Φ⁻¹(0.95) = 1.6449.
    out = buderer_n(0.9, 0.9, 0.5, 0.05, confidence=0.9)
    assert out["cases"] == pytest.approx(stats.norm.ppf(0.95) ** 2 * 0.09 / 0.0025)
    with pytest.raises(QuestionError) as e:
        buderer_n(0.9, 0.9, 1.2, 0.05)
    assert e.value.field == "assumptions.prevalence"
    with pytest.raises(QuestionError) as e:
        buderer_n(0.9, 0.9, 0.2, 0.0)
    assert e.value.field == "hypothesis.half_width"


# --- the diagnostic × single_group cell --------------------------------------------------------


def accuracy(**over) -> dict:
    return posted(ACCURACY, **over)


def test_cell_answers_with_the_larger_of_the_two_sizes():
    # formula: Buderer (1996) at Se 0.9, Sp 0.8, prevalence 0.2, E 0.05, 95%:
    # n_sens = 1.96²·0.09/(0.0025·0.2) = 691.46 > n_spec = 1.96²·0.16/(0.0025·0.8) = 307.32.
    z2 = stats.norm.ppf(0.975) ** 2
    n_sens, n_spec = z2 * 0.09 / (0.0025 * 0.2), z2 * 0.16 / (0.0025 * 0.8)
    record = record_of(accuracy())
    assert record["power"] is None
    assert record["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(n_sens)
    assert record["sample_size"]["total"] == math.ceil(n_sens)
    derived = record["method"]["derived"]
    assert derived["subjects_for_specificity"] == pytest.approx(n_spec)
    assert derived["governed_by"] == "sensitivity"
    block = record["precision"]
    assert block["half_width_target"] == 0.05
    assert block["half_width_expected"] <= 0.05
    assert block["half_width_expected"] == pytest.approx(0.05, abs=1e-4)


def test_cell_half_width_at_a_given_size():
    body = accuracy(find="precision", sample_size={"per_group": [800]})
    body["hypothesis"] = {"aim": "estimation"}
    record = record_of(body)
    # formula: z·√(Se(1 − Se)/(n·prev)) = 1.96·√(0.09/160) = 0.0465 (sensitivity, the wider)
    expected = stats.norm.ppf(0.975) * math.sqrt(0.09 / 160)
    assert record["precision"]["half_width_expected"] == pytest.approx(expected)


def test_cell_refuses_a_test_question_naming_the_field():
    from service.schemas import QuestionInvalid, load_question

    body = accuracy()
    body.pop("hypothesis")
    with pytest.raises(QuestionInvalid) as e:
        load_question(body)
    assert "hypothesis.aim" in e.value.errors or "analysis" in e.value.errors
    with pytest.raises(QuestionInvalid) as e:
        load_question(accuracy(effect={"sensitivity": 0.9}))
    assert "effect.specificity" in e.value.errors
    with pytest.raises(QuestionInvalid) as e:
        load_question(accuracy(alpha=0.05))
    assert "alpha" in e.value.errors
