"""The report says what the simulated size means: holds, conservative (valid, costs power) or
exceeds (not valid here), judged against the alpha each test used."""

from __future__ import annotations

import copy

import pytest
from reports_testkit import REQUEST, answer

from service.engine.explore import robustness
from service.engine.search import wilson
from service.reports.justification import justification
from service.reports.render import render_report


@pytest.fixture(scope="module")
def fisher_record() -> dict:
    # Fisher's exact test at p = 0.3, 40 per group: exact size 0.0282 (exact enumeration in
    # tests/engine/test_size_verdict.py), well below 0.05.
    return answer(
        outcome="binary",
        effect={"p_treatment": 0.6},
        assumptions={"p_control": 0.3},
        find="power",
        sample_size={"per_group": [40, 40]},
        analysis="fisher_exact",
        method="simulation",
        simulation={"replicates": 4000, "seed": 11},
    )


def test_a_conservative_test_is_called_valid(fisher_record):
    text = justification(fisher_record)
    assert fisher_record["type_i_error"]["verdict"] == "conservative"
    assert "the type I error check is conservative" in text
    assert "valid but costs some power" in text
    assert "does not hold its level" not in text


@pytest.mark.parametrize(
    "rejections,verdict", [(200, "holds"), (112, "conservative"), (260, "exceeds")]
)
def test_each_verdict_has_its_words(fisher_record, rejections, verdict):
    record = copy.deepcopy(fisher_record)
    t1 = record["type_i_error"]
    t1.update(estimate=rejections / 4000, ci95=wilson(rejections, 4000), verdict=verdict)
    text = justification(record)
    words = {"holds": "holds", "conservative": "is conservative", "exceeds": "exceeds alpha"}
    # the record's verdict word, exactly, and no other verdict's
    for other, phrase in words.items():
        assert (f"the type I error check {phrase}" in text) == (other == verdict), other
    assert ("does not hold its level" in text) == (verdict == "exceeds")


def test_robustness_panel_flags_only_sizes_above_the_per_comparison_alpha(simulated_record):
    q = copy.deepcopy(simulated_record["question"])
    q["adjustments"]["comparisons"] = 2
    per_group = simulated_record["sample_size"]["per_group"]
    panel = robustness(q, per_group, replicates=1000, seed=5)
    record = dict(simulated_record, question=q)
    page = render_report(REQUEST, record, curve_svg="<svg></svg>", robustness=panel)
    assert "level its test used, 0.025 (0.05 split over the comparisons)" in page
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    assert normal["type_i_error"]["verdict"] == "holds"  # a t test on normal data at 0.025
    flagged = sum(d["type_i_error"]["verdict"] == "exceeds" for d in panel["departures"])
    assert page.count('class="flag">exceeds alpha') == flagged
    # A panel stored before verdicts (overall alpha only) is judged at alpha / comparisons too.
    old = copy.deepcopy(panel)
    del old["alpha_per_comparison"]
    for d in old["departures"]:
        d["type_i_error"] = {k: d["type_i_error"][k] for k in ("estimate", "mcse", "ci95")}
    again = render_report(REQUEST, record, curve_svg="<svg></svg>", robustness=old)
    assert again.count('class="flag">exceeds alpha') == flagged
