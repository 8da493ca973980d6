"""The report says what was simulated and what was rounded (robustness header, step caption).

Exact arithmetic only: 137 enrolled with 10% dropout leave 123.3 analyzed, simulated at 123
(common practice, no source: dropout divides the analyzed n by 1 − rate).
"""

from markupsafe import escape
from reports_testkit import REQUEST, answer, question

from service.engine import compute
from service.engine.explore import robustness
from service.reports.render import render_report


def test_robustness_header_names_the_analyzed_numbers_that_were_simulated():
    q = question(find="power", sample_size={"per_group": [137, 137]}, adjustments={"dropout": 0.1})
    record = compute(q)
    panel = robustness(q, [137, 137], replicates=200, seed=5)
    assert panel["per_group"] == [137, 137]
    assert panel["analyzed_per_group"] == [123, 123]  # floor(137 × 0.9) = floor(123.3)
    page = render_report(REQUEST, record, curve_svg="<svg></svg>", robustness=panel)
    assert "simulated at 123 analyzed per group (from 137 enrolled per group" in page
    assert "200 replicates" in page and "trials" not in page
    assert f"{escape(record['method']['analysis_label'])} simulated at 123" in page
    assert "at 137 per group" not in page


def test_step_caption_claims_rounding_only_where_it_happened():
    power = answer(find="power", sample_size={"per_group": [47, 47]}, adjustments={"dropout": 0.1})
    page = render_report(REQUEST, power, curve_svg="<svg></svg>")
    assert (
        "rounded up at every step" not in page and "rounds" not in page.split("<caption>")[1][:200]
    )
    assert "the numbers analyzed are not rounded" in page
    solved = answer(adjustments={"dropout": 0.1})
    page = render_report(REQUEST, solved, curve_svg="<svg></svg>")
    assert "every step rounds each group up to whole subjects" in page


def test_exact_ratio_rounding_is_named_in_the_steps():
    record = answer(allocation_ratio=3.0, allocation_rounding="exact_ratio")
    assert record["sample_size"]["per_group"] == [43, 129]  # 42.35 / 127.04, ratio kept at 3
    page = render_report(REQUEST, record, curve_svg="<svg></svg>")
    assert "rounded up keeping the allocation ratio exact" in page
    assert "keeping the allocation ratio exact." in page.split("<caption>")[1][:300]


def test_cluster_step_caption_says_which_rows_are_whole_clusters():
    # Donner & Klar (2000): design effect 1 + (20 − 1)·0.05 = 1.95 turns 63.77 into 124.3
    # individuals, which the table shows unrounded before the whole-cluster rows.
    record = answer(adjustments={"cluster": {"mean_size": 20, "icc": 0.05}})
    page = render_report(REQUEST, record, curve_svg="<svg></svg>")
    caption = page.split("<caption>")[1].split("</caption>")[0]
    assert "unrounded number of individuals" in caption and "whole clusters" in caption
    assert "every step rounds each group up" not in caption
    assert "124.3 individuals" in page
