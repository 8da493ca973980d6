"""The report says what the simulated size means: holds, conservative (valid, costs power) or
exceeds (not valid here), judged against the alpha each test used."""

from __future__ import annotations

import copy

import pytest
from reports_testkit import REQUEST

from service.engine import compute
from service.engine.explore import robustness
from service.engine.search import wilson
from service.reports.justification import SIZE_WORDS, justification
from service.reports.render import render_report
from tests.engine.questions import make_q


@pytest.fixture(scope="module")
def fisher_record() -> dict:
    # Fisher's exact test at p = 0.3, 40 per arm: exact size 0.0282 (exact enumeration in
    # tests/engine/test_size_verdict.py), well below 0.05.
    q = make_q(
        "two_proportions",
        effect={"p_control": 0.3, "p_treatment": 0.6},
        per_arm=(40, 40),
        simulation={"test": "fisher_exact", "replicates": 4000, "seed": 11},
    )
    return compute(q)


def test_a_conservative_test_is_called_valid(fisher_record):
    text = justification(fisher_record)
    assert "conservative" in text and "valid but costs some power" in text
    assert "does not hold its level" not in text


@pytest.mark.parametrize(
    "rejections,verdict", [(200, "holds"), (112, "conservative"), (260, "exceeds")]
)
def test_each_verdict_has_its_words(fisher_record, rejections, verdict):
    record = copy.deepcopy(fisher_record)
    t1 = record["type_i_error"]
    t1.update(estimate=rejections / 4000, ci95=wilson(rejections, 4000), verdict=verdict)
    text = justification(record)
    assert SIZE_WORDS[verdict].strip(",; ").split(":")[0] in text
    assert ("does not hold its level" in text) == (verdict == "exceeds")


def test_robustness_panel_flags_only_sizes_above_the_per_comparison_alpha(simulated_record):
    q = copy.deepcopy(simulated_record["question"])
    q["adjustments"]["comparisons"] = 2
    per_arm = simulated_record["sample_size"]["per_arm"]
    panel = robustness(q, per_arm, replicates=1000, seed=5)
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
