"""A design registered from outside (tests/schemas/toy_design.py) renders a whole report through
the generic renderer: no report file names it, every word comes from its declarations."""

from __future__ import annotations

import dataclasses
import math
from statistics import NormalDist

import pytest
from reports_testkit import REQUEST

from service.engine import compute, designs
from service.reports import describe
from service.reports.justification import fmt_power, justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report, render_staff_list
from service.schemas import load_question
from tests.schemas import toy_design


@pytest.fixture
def toy():
    design = toy_design.register()
    yield design
    toy_design.unregister()


def _record() -> dict:
    return compute(load_question(toy_design.QUESTION))


def test_the_toy_design_renders_a_report(toy):
    record = _record()
    # formula: Wald test of log(rate ratio), n = (z.975 + z.80)² (1/1.5 + 1/1.05) / ln²0.7
    # (the toy's own formula, common practice, no source)
    z = NormalDist().inv_cdf
    n = (z(0.975) + z(0.8)) ** 2 * (1 / 1.5 + 1 / (1.5 * 0.7)) / math.log(0.7) ** 2
    assert record["sample_size"]["per_group"] == [math.ceil(n)] * 2
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    text = justification(record)
    for words in (
        toy.label,
        toy.analyses[0].label,
        toy.phrases.effect(record["question"], record),
        toy.phrases.assumptions(record["question"]),
        fmt_power(record["power"]["estimate"]),
        f"{math.ceil(n)} per group",
    ):
        assert words in text, words
    assert f"“{toy.label}”" in page and toy.analyses[0].label in page
    staff = render_staff_list([dict(REQUEST, question=record["question"])])
    assert toy.label in staff and toy.analyses[0].label in staff


def test_a_design_without_phrases_is_told_from_its_field_labels(toy):
    bare = designs.register(dataclasses.replace(toy, phrases=None))
    record = _record()
    q = record["question"]
    assert describe.effect_text(q) == "rate ratio 0.7"
    assert describe.assumptions_text(q) == "control event rate 1.5"
    text = justification(record)
    assert "rate ratio 0.7 with control event rate 1.5" in text
    assert bare.fields[0].name not in text  # rate_ratio: the label, never the field name
