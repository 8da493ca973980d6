"""The report's words: human phrases from the design object, the investigator's own numbers.

Every number checked here is the number computed or entered: the report's power string is the
record's estimate formatted, the justification's SD is the posted one, derived values sit in the
method note only.
"""

from __future__ import annotations

import json
import math
import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import pytest
from reports_testkit import REQUEST, answer, question

from service.engine import compute, designs
from service.reports import describe
from service.reports.justification import fmt_power, justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report, render_staff_list
from service.schemas import load_question

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"

# A raw token: snake_case words such as welch_t, two_groups, noncentral_f, sd_difference.
_TOKEN = re.compile(r"\b[a-z]+(?:_[a-z0-9]+)+\b")


class _Visible(HTMLParser):
    """The prose a reader sees: not the stylesheet, script, drawing, or code and JSON quoted
    verbatim for re-running (the seed scheme, the normalized question)."""

    _HIDDEN = {"style", "script", "svg", "pre", "code", "title"}

    def __init__(self):
        super().__init__()
        self.depth, self.parts = 0, []

    def handle_starttag(self, tag, attrs):
        self.depth += tag in self._HIDDEN

    def handle_endtag(self, tag):
        self.depth -= tag in self._HIDDEN

    def handle_data(self, data):
        if not self.depth:
            self.parts.append(data)


def _visible(page: str) -> str:
    parser = _Visible()
    parser.feed(page)
    return " ".join(parser.parts)


def _page(record: dict) -> str:
    return render_report(REQUEST, record, curve_svg="<svg></svg>")


def test_analytic_and_simulated_power_print_alike(simulated_power_record):
    analytic = answer(find="power", sample_size={"per_group": [30, 30]})
    for record in (analytic, simulated_power_record):
        shown = fmt_power(record["power"]["estimate"])
        assert re.fullmatch(r"\d{1,3}\.\d%", shown)  # one decimal, percent: "47.8%"
        assert f"is {shown}." in justification(record)
        # the answer's power figure is the record's estimate, formatted
        assert f'<span class="value">{shown}</span>' in _page(record)
    lo, hi = simulated_power_record["power"]["ci95"]
    assert f"95% interval {fmt_power(lo)} to {fmt_power(hi)}" in justification(
        simulated_power_record
    )


def test_the_cell_and_the_analysis_are_named_in_words(simulated_record):
    q = simulated_record["question"]
    design = designs.get(q["outcome"], q["layout"])
    text = justification(simulated_record)
    assert f"“{design.label}”" in text
    assert simulated_record["method"]["analysis_label"] in text
    page = _visible(_page(simulated_record))
    assert design.label in page and simulated_record["method"]["analysis_label"] in page


def test_paired_prints_the_entered_sd_and_correlation_not_the_derived_sd():
    record = answer(
        layout="paired", effect={"difference": 5.0}, assumptions={"sd": 8.0, "correlation": 0.6}
    )
    assert record["question"]["assumptions"] == {"sd": 8.0, "correlation": 0.6}
    # SD of the differences: √(2 · 8² · (1 − 0.6)) = √51.2 = 7.15542 (common practice, no source)
    derived = record["method"]["derived"]["sd_difference"]
    assert derived == pytest.approx(math.sqrt(51.2))
    text = justification(record)
    opening = text[: text.index("Method note")]
    assert "8" in re.findall(r"\d+(?:\.\d+)?", opening) and "0.6" in opening
    assert describe.fmt_num(derived) not in opening and "7.16" not in opening
    note = text[text.index("Method note") :]
    assert describe.fmt_num(derived) in note
    assert describe.field_label(record["question"], "sd_difference") in note


def test_survival_prints_its_time_unit_and_the_entered_median(survival_record):
    text = justification(survival_record)
    assert "12 months" in text and "24 months" in text
    opening = text[: text.index("Method note")] if "Method note" in text else text
    scale = 12.0 / math.log(2)  # the exponential scale 17.3123 is derived, never entered
    assert describe.fmt_num(scale) not in opening


def test_find_effect_names_the_field_by_its_label():
    record = answer(effect={}, find="effect", sample_size={"per_group": [64, 64]})
    q = record["question"]
    label = describe.field_label(q, record["effect"]["field"])
    text = justification(record)
    assert f"the smallest {label} detectable with 80% power" in text
    assert record["effect"]["field"] not in text.replace(label, "")


def test_no_raw_tokens_in_any_examples_report():
    """Every example (each cell's, and the simulated ones) renders with words, never tokens."""
    for path in sorted(EXAMPLES.glob("*.json")):
        record = compute(load_question(json.loads(path.read_text(encoding="utf-8"))))
        page = _visible(_page(record))
        assert not _TOKEN.findall(page), (path.name, sorted(set(_TOKEN.findall(page))))
        text = justification(record)
        assert not _TOKEN.findall(text), (path.name, _TOKEN.findall(text))
        if record["question"]["method"] == "simulation":  # replicates are called replicates
            assert f"{describe.fmt_count(record['power']['replicates'])} replicates" in text


def test_curve_for_find_power_does_not_say_chosen(simulated_power_record):
    points = curve_points(simulated_power_record, replicates=200)
    assert "chosen" not in points["title"] and "stated size" in points["title"]


def test_the_standalone_curve_carries_its_title_and_assumptions():
    record = answer(alpha=0.025, adjustments={"dropout": 0.1})
    q = record["question"]
    points = curve_points(record)
    drawn = " ".join(ET.fromstring(power_curve_svg(points)).itertext())
    drawn = " ".join(drawn.split())  # the drawing wraps long lines
    assert "chosen size" in points["title"]
    for words in (
        points["title"],
        describe.cell_label(q),
        record["method"]["analysis_label"],
        "alpha 0.025",
        "two-sided",
        "dropout 10%",
        describe.field_label(q, "difference"),
        "0.5",
    ):
        assert words in drawn, words


def test_staff_list_rows_name_the_cell_and_the_analysis():
    q = question()
    page = render_staff_list([dict(REQUEST, question=q, method="analytic")])
    row = _visible(page)
    design = designs.get(q["outcome"], q["layout"])
    assert REQUEST["protocol"]["title"] in row
    assert design.label in row and describe.analysis_label(q) in row
    assert not _TOKEN.findall(row)


def test_every_entered_value_is_printed_as_entered():
    """Each cell's example: every number posted in effect and assumptions is in the paragraph."""
    for design in designs.all():
        posted = json.loads((EXAMPLES / design.example).read_text(encoding="utf-8"))
        record = compute(load_question(posted))
        text = justification(record)
        opening = text.split("Method note")[0]
        for block in ("effect", "assumptions"):
            for name, value in (posted.get(block) or {}).items():
                for v in value if isinstance(value, list) else [value]:
                    if isinstance(v, (int, float)) and not isinstance(v, bool):
                        assert describe.fmt_num(v) in opening, (design.label, name, v)


def test_the_cautions_stay():
    page = _visible(_page(answer()))
    for words in ("planning aid", "qualified statistician", "Ethics committees, regulators"):
        assert words in page, words
