"""The words of a precision question's report: what interval, what confidence, what half-width,
with what probability; every number is the record's. Demo data: Northbridge, invented."""

from __future__ import annotations

import html
import re

import pytest

from service.engine import compute
from service.reports.describe import fmt_num, fmt_pct
from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from service.schemas import load_question
from tests.reports.reports_testkit import REQUEST


def _record(**hyp) -> dict:
    raw = {
        "outcome": "continuous",
        "layout": "single_group",
        "hypothesis": {"aim": "estimation", "half_width": 3.0, **hyp},
        "assumptions": {"sd": 20.0},
        "adjustments": {"dropout": 0.1},
    }
    return compute(load_question(raw))


def test_justification_says_the_interval_in_words():
    record = _record()
    text = justification(record)
    p = record["precision"]
    assert "two-sided 95% confidence interval whose half-width is at most 3 on average" in text
    assert "the mean, assuming a standard deviation of 20" in text
    assert f"the half-width is {fmt_num(p['half_width_expected'])}" in text
    assert f"is {fmt_pct(p['probability'])}" in text  # the chance of reaching the target
    assert "10% dropout" in text and str(record["sample_size"]["total"]) in text
    assert "power" not in text.lower()


def test_justification_with_assurance_states_the_probability():
    record = _record(assurance=0.9, confidence=0.9)
    text = justification(record)
    p = record["precision"]
    assert (
        "two-sided 90% confidence interval whose half-width is at most 3 with a probability of "
        "at least 90%"
    ) in text
    assert f"it is at most {fmt_num(p['half_width_assured'])}" in text


@pytest.mark.parametrize("hyp", [{}, {"assurance": 0.8}])
def test_report_page_shows_the_precision_and_no_power(hyp):
    record = _record(**hyp)
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    text = html.unescape(re.sub(r"<[^>]+>", " ", page))
    assert "Precision curve" in text and "Power curve" not in text
    assert "Significance level" not in text and "Target power" not in text
    assert fmt_num(record["precision"]["half_width_expected"]) in text
    assert "half-width" in text and "confidence interval" in text


def test_the_report_header_names_precision_not_power():
    # A precision question computes no power: the page's header says what it reports.
    record = compute(
        load_question(
            {
                "outcome": "binary",
                "layout": "single_group",
                "hypothesis": {"aim": "estimation", "half_width": 0.05},
                "effect": {"p": 0.3},
            }
        )
    )
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    assert "Sample size and precision report" in page
    assert "Sample size and power report" not in page
