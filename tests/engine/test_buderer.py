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
