"""Sensitivity and specificity to a given precision (Buderer 1996, Acad Emerg Med 3:895): the
report says two intervals, each with its half-width, and which one sets the sample size; every
number is the record's, and the record's numbers are Buderer's formula. Demo data: Northbridge
(the chest-pain rule example), invented."""

from __future__ import annotations

import html
import math
import re

import pytest
from scipy import stats

from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from tests.posted import ACCURACY, posted, record_of
from tests.reports.reports_testkit import REQUEST

Z = stats.norm.ppf(0.975)


def _record(se: float, sp: float, prev: float, **over) -> dict:
    raw = posted(
        ACCURACY,
        effect={"sensitivity": se, "specificity": sp},
        assumptions={"prevalence": prev},
        **over,
    )
    return record_of(raw)


def _half_width(p: float, subjects: float) -> float:
    # formula: the Wald half-width z·√(p(1 − p)/m) among m expected subjects (Buderer 1996)
    return Z * math.sqrt(p * (1 - p) / subjects)


def _page_text(record: dict) -> str:
    svg = power_curve_svg(curve_points(record, points=5))
    page = render_report(REQUEST, record, curve_svg=svg)
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def test_record_holds_both_half_widths_by_buderers_formula():
    record = _record(0.9, 0.8, 0.2)
    n = record["sample_size"]["steps"][0]["per_group"][0]
    # formula: Buderer (1996), n = z²·Se(1 − Se)/(E²·prevalence) = 691.46 → 692 (sensitivity)
    assert n == math.ceil(Z**2 * 0.9 * 0.1 / (0.05**2 * 0.2))
    sens, spec = record["precision"]["intervals"]
    assert (sens["estimand"], sens["subjects"]) == ("sensitivity", "cases")
    assert (spec["estimand"], spec["subjects"]) == ("specificity", "non-cases")
    assert sens["expected_subjects"] == pytest.approx(n * 0.2)
    assert spec["expected_subjects"] == pytest.approx(n * 0.8)
    assert sens["half_width_expected"] == pytest.approx(_half_width(0.9, n * 0.2), rel=1e-12)
    assert spec["half_width_expected"] == pytest.approx(_half_width(0.8, n * 0.8), rel=1e-12)
    assert record["precision"]["wider"] == "sensitivity"
    assert record["precision"]["half_width_expected"] == sens["half_width_expected"]


def test_justification_says_two_intervals_and_which_sets_the_size():
    record = _record(0.9, 0.8, 0.2, adjustments={"dropout": 0.05})
    text = justification(record)
    sens, spec = record["precision"]["intervals"]
    assert "a two-sided 95% confidence interval" not in text
    assert (
        "by two two-sided 95% confidence intervals, one for the sensitivity (among the cases) and "
        "one for the specificity (among the non-cases), each with a half-width of at most 0.05 "
        "when the observed proportions equal the planned ones."
    ) in text
    assert (
        f"At the analyzed size the sensitivity interval's half-width is "
        f"{sens['half_width_expected']:g} (among the expected "
        f"{round(sens['expected_subjects'], 1):g} cases) and the specificity interval's is "
        f"{spec['half_width_expected']:g} (among the expected "
        f"{round(spec['expected_subjects'], 1):g} non-cases)"
    ) in text
    # formula: the specificity alone needs z²·Sp(1 − Sp)/(E²·(1 − prevalence)) = 307.32
    alone = Z**2 * 0.8 * 0.2 / (0.05**2 * 0.8)
    assert (
        "The sensitivity interval is the wider of the two and sets the sample size; the "
        f"specificity interval alone would need {alone:.2f} participants (unrounded)."
    ) in text


def test_specificity_can_set_the_size():
    # Buderer's formula: Se 0.8, Sp 0.7, prevalence 0.6, E 0.07 → the specificity's n is larger
    record = _record(0.8, 0.7, 0.6, hypothesis={"aim": "estimation", "half_width": 0.07})
    assert record["precision"]["wider"] == "specificity"
    alone = Z**2 * 0.8 * 0.2 / (0.07**2 * 0.6)
    assert (
        "The specificity interval is the wider of the two and sets the sample size; the "
        f"sensitivity interval alone would need {alone:.2f} participants (unrounded)."
    ) in justification(record)


def test_a_stated_size_gives_both_half_widths():
    raw = posted(
        ACCURACY,
        find="precision",
        sample_size={"total": 400},
        hypothesis={"aim": "estimation"},
        effect={"sensitivity": 0.8, "specificity": 0.7},
        assumptions={"prevalence": 0.6},
    )
    record = record_of(raw)
    text = justification(record)
    assert (
        "With 400 participants enrolled, two two-sided 95% confidence intervals, one for the "
        "sensitivity (among the cases) and one for the specificity (among the non-cases) "
        "estimate the sensitivity"
    ) in text
    assert (
        f"At this size the sensitivity interval's half-width is {_half_width(0.8, 240):g} (among "
        f"the expected 240 cases) and the specificity interval's is {_half_width(0.7, 160):g} "
        "(among the expected 160 non-cases)"
    ) in text
    assert "The specificity interval is the wider of the two." in text
    assert "sets the sample size" not in text
    page = _page_text(record)
    assert "Looking for The half-width of each interval the stated sample size gives" in page


def test_report_page_shows_each_interval_and_draws_both():
    record = _record(0.9, 0.8, 0.2, adjustments={"dropout": 0.05})
    sens, spec = record["precision"]["intervals"]
    page = _page_text(record)
    assert "Looking for The sample size that makes each confidence interval narrow enough" in page
    assert "Interval Two two-sided 95% confidence intervals, one for the sensitivity" in page
    assert (
        f"{sens['half_width_expected']:g} half-width of the sensitivity interval (among the "
        f"expected {round(sens['expected_subjects'], 1):g} cases), the wider: it sets the sample "
        "size"
    ) in page
    assert (
        f"{spec['half_width_expected']:g} half-width of the specificity interval (among the "
        f"expected {round(spec['expected_subjects'], 1):g} non-cases)"
    ) in page
    assert "The half-width of each interval (sensitivity and specificity) against" in page
    points = curve_points(record, points=5)
    assert [i["estimand"] for i in points["intervals"]] == ["sensitivity", "specificity"]
    # each line is the Wald half-width at the analyzed size (enrolled less 5% dropout)
    for n, h in zip(points["n"], points["intervals"][1]["half_widths"], strict=True):
        assert h == pytest.approx(_half_width(0.8, n * 0.95 * 0.8), rel=1e-9)
    svg = power_curve_svg(points)
    assert 'id="analytic-curve"' in svg and 'id="analytic-curve-1"' in svg
    assert "Half-width of each interval against enrolled" in svg
