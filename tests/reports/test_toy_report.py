"""Designs registered from outside (the schema tests' count × two groups toy and the engine tests'
count × single group toy) render whole reports through the generic renderer: no report file
names them, every word comes from their declarations."""

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
from tests.engine import toy_design as engine_toy
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


@pytest.fixture
def single_toy():
    design = engine_toy.register()
    yield design
    engine_toy.unregister()


def _single(**fields) -> dict:
    posted = {
        "outcome": "toy_count",
        "layout": "single_group",
        "effect": {"rate_ratio": 1.5},
        "assumptions": {"reference_rate": 2.0},
        **fields,
    }
    return compute(load_question(posted))


def test_the_engine_toy_reports_every_find(single_toy):
    label = single_toy.field("rate_ratio").label
    sized = _single()
    effect = _single(
        find="effect", effect={}, sample_size={"per_group": [sized["sample_size"]["total"]]}
    )
    for record in (sized, _single(find="power", sample_size={"per_group": [40]}), effect):
        page = render_report(
            REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5))
        )
        text = justification(record)
        assert single_toy.label in text and single_toy.analyses[0].label in text
        shown = fmt_power(record["power"]["estimate"])
        assert shown in page and (shown in text or record["question"]["find"] == "effect")
        assert "participants" in text and "rate_ratio" not in text
        assert "None" not in text and "None" not in page
    text = justification(effect)
    assert f"the smallest {label} detectable with 80% power" in text
    assert describe.fmt_num(effect["effect"]["value"]) in text
    assert f"smallest detectable {label}" in curve_points(effect, points=5)["title"]
