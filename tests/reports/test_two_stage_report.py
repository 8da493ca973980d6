"""The report page of Simon's two-stage design says what was computed: the design's maximum and
expected sizes, its exact power and type I error (not the target echoed), and its two stages in
place of adjustment steps, which the design does not take. Demo data: Northbridge (the phase II
example), invented."""

from __future__ import annotations

import html
import json
import re
import subprocess
import sys

import pytest
from scipy import stats

from service.reports.justification import justification
from service.reports.render import render_report
from tests.posted import SIMON, posted, record_of, simon_posted
from tests.reports.reports_testkit import REQUEST

P0, P1 = 0.2, 0.4


def _text(page: str) -> str:
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def _page_text(record: dict) -> str:
    return _text(render_report(REQUEST, record, curve_svg="<svg></svg>"))


def _promising(n1: int, r1: int, n: int, r: int, p: float) -> float:
    """P(more than r1 of n1 respond, then more than r of all n) by scipy, summed by hand."""
    return sum(
        stats.binom.pmf(x1, n1, p) * stats.binom.sf(r - x1, n - n1, p)
        for x1 in range(r1 + 1, n1 + 1)
    )


def _says_the_design(text: str, n1: int, r1: int, n: int, r: int, mean_n: str) -> None:
    """The answer's figures and the stage rows, each number recomputed with scipy."""
    power, alpha = _promising(n1, r1, n, r, P1), _promising(n1, r1, n, r, P0)
    stop0, stop1 = stats.binom.cdf(r1, n1, P0), stats.binom.cdf(r1, n1, P1)
    # formula: EN(p0) = n1 + (1 − P(X1 ≤ r1 | p0))·(n − n1), by scipy's binomial
    assert f"{n1 + (1 - stop0) * (n - n1):.1f}" == mean_n
    assert (
        f"{n} enrolled at most (when the study continues to stage 2) "
        f"{mean_n} enrolled on average when the true response rate is 0.2 (uninteresting) "
        f"{power:.4f} exact power when the true response rate is 0.4 (worth pursuing) "
        f"{alpha:.4f} exact type I error when the true response rate is 0.2 (uninteresting)"
    ) in text
    assert (
        f"Stage Detail Patients (cumulative) Stage 1 treat n1 = {n1}; stop when r1 = {r1} or "
        f"fewer respond (probability of stopping {stop0:.2f} at the uninteresting rate 0.2, "
        f"{stop1:.2f} at the rate worth pursuing 0.4) {n1} Stage 2 treat {n - n1} more; call "
        f"the treatment promising when more than r = {r} of the n = {n} respond {n}"
    ) in text
    assert (
        "No dropout adjustment is made: the stage rules count evaluable patients, so replace "
        "patients who cannot be evaluated."
    ) in text
    # no single enrolled number, no adjustment table, no power "at the analyzed size"
    for wrong in ("enrolled in total", "Adjustment steps", "Base size", "analyzed size"):
        assert wrong not in text, wrong


@pytest.mark.parametrize(
    "criterion, design, mean_n",
    [("optimal", (3, 13, 12, 43), "20.6"), ("minimax", (4, 18, 10, 33), "22.3")],
)
def test_found_design_report_says_its_sizes_and_exact_characteristics(criterion, design, mean_n):
    # published: Simon (1989), Controlled Clin Trials 10:1, Table 1 (p0 .20, p1 .40, alpha .05,
    # power .80): optimal 3/13, 12/43 with EN(p0) 20.6, minimax 4/18, 10/33 with EN(p0) 22.3;
    # recomputed by the engine's enumeration.
    record = record_of(posted(SIMON, analysis_options={"criterion": criterion}))
    r1, n1, r, n = design
    block = record["sample_size"]["details"]["two_stage"]
    assert (block["r1"], block["n1"], block["r"], block["n"]) == design
    text = _page_text(record)
    _says_the_design(text, n1, r1, n, r, mean_n)
    assert (
        f"Stages Simon's {criterion} design, found by exact search among every two-stage design "
        f"up to n = {block['searched_max_n']}."
    ) in text
    # the power shown is the design's exact power, not the 80% target echoed
    assert abs(record["power"]["estimate"] - _promising(n1, r1, n, r, P1)) < 1e-12
    assert "80.0%" not in text
    words = justification(record)
    assert "The power at the analyzed size" not in words
    assert f"the exact power {_promising(n1, r1, n, r, P1):.4f}" in words


@pytest.mark.parametrize("method", ["analytic", "simulation"])
def test_posted_design_report_says_its_sizes_and_exact_characteristics(method):
    # published: Simon (1989), Table 1, the minimax design 4/18, 10/33 for p0 .20 / p1 .40
    raw = simon_posted(18, 4, 33, 10, method=method)
    if method == "simulation":
        raw["simulation"] = {"replicates": 2000, "seed": 20261202}
    record = record_of(raw)
    text = _page_text(record)
    _says_the_design(text, 18, 4, 33, 10, "22.3")
    assert "Stages The posted design." in text
    assert "Looking for The power of the stated design" in text
    assert "Total size n (enrolled at most, when the study continues to stage 2) 33" in text
    assert "Enrolled 33" not in text
    words = justification(record)
    assert "participants enrolled" not in words  # 33 is the most enrolled, not the number
    assert (
        "the posted two-stage design enrolls 22.3 participants on average when the response rate "
        f"is the uninteresting one, and at most 33, and its power to detect a response rate of "
        f"0.4 worth pursuing with an uninteresting response rate of 0.2 is "
        f"{100 * record['power']['estimate']:.1f}%."
    ) in words
    simulated = "simulated power (95% interval"
    if method == "simulation":  # the simulated power is shown beside the exact one
        power = record["power"]
        lo, hi = (f"{100 * x:.1f}%" for x in power["ci95"])
        assert (
            f"{100 * power['estimate']:.1f}% simulated power (95% interval {lo} to {hi})"
        ) in text
        # the analytic power beside a simulation is an exact binomial sum here, not a formula
        exact = _promising(18, 4, 33, 10, P1)
        assert (
            f"The exact enumeration gives a power of {100 * exact:.1f}% at the same size." in words
        )
        assert "analytic formula" not in words
    else:
        assert simulated not in text


def test_cli_report_says_the_same(tmp_path):
    """`sizewise report` writes the page the service serves, with the same words."""
    # published: Simon (1989), Table 1, the optimal design 3/13, 12/43 (EN(p0) 20.6)
    record = record_of(SIMON)
    path = tmp_path / "simon.json"
    path.write_text(json.dumps(record), encoding="utf-8")
    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "report", str(path), "--out", str(tmp_path)],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    page = open(done.stdout.strip().splitlines()[-1], encoding="utf-8").read()
    _says_the_design(_text(page), 13, 3, 43, 12, "20.6")
