"""A size found by exact search is whole from the start: the report says how it was found and
quotes no "unrounded" value; a formula's answer keeps its unrounded n. Demo data: Northbridge,
invented."""

from __future__ import annotations

import html
import math
import re

import pytest
from scipy import stats

from service.reports.justification import justification
from service.reports.render import render_report
from tests.posted import PAIRED, SIMON, SINGLE_RATE, posted, record_of
from tests.reports.reports_testkit import REQUEST


def _page_text(record: dict) -> str:
    page = render_report(REQUEST, record, curve_svg="<svg></svg>")
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def _exact_power(n: int, p: float, p0: float, alpha: float) -> float:
    """One-sided exact binomial test (reject for large counts) by scipy: its power at p."""
    k = int(stats.binom.isf(alpha, n, p0)) + 1  # smallest k with P(X ≥ k | p0) ≤ alpha
    while k > 0 and stats.binom.sf(k - 2, n, p0) <= alpha:
        k -= 1
    return float(stats.binom.sf(k - 1, n, p))


def test_exact_binomial_answer_says_it_was_searched_not_rounded():
    record = record_of(posted(SINGLE_RATE, analysis="exact_binomial"))
    n = record["sample_size"]["per_group"][0]
    block = record["sample_size"]["details"]["exact_search"]
    # general-purpose library: scipy's binomial tails give the exact test's power at each n;
    # n is the smallest size from which every size checked reaches 80%, n − 1 falls short.
    powers = {m: _exact_power(m, 0.35, 0.2, 0.05) for m in range(n - 1, block["checked_through"])}
    assert all(powers[m] >= 0.8 for m in range(n, block["checked_through"]))
    assert powers[n - 1] < 0.8
    text = justification(record)
    assert "unrounded" not in text and f"{n}.00" not in text
    assert (
        f"{n} participants are needed before adjustment (found by exact search: the smallest n "
        "from which the exact test's power stays at or above the target for every larger n "
        "checked)."
    ) in text
    page = _page_text(record)
    assert "unrounded" not in page and f"{n}.00" not in page
    assert "solved by the formula" not in page
    assert "Base size found by exact search: the smallest n from which" in page
    assert "The base size is a whole number found by exact search." in page


def test_later_steps_still_round_after_an_exact_search():
    record = record_of(posted(SINGLE_RATE, analysis="exact_binomial", adjustments={"dropout": 0.1}))
    n = record["sample_size"]["steps"][0]["per_group"][0]
    # formula: dropout divides the analyzed size by 1 − 0.1 and rounds up
    assert record["sample_size"]["per_group"] == [math.ceil(n / 0.9 - 1e-9)]
    page = _page_text(record)
    assert (
        "The base size is a whole number found by exact search; each later step starts from the "
        "row above and rounds each group up to whole subjects."
    ) in page
    assert "unrounded" not in page


def test_the_z_test_formula_keeps_its_unrounded_size():
    record = record_of(posted(SINGLE_RATE, analysis="z_test"))
    # formula: Lachin (1981), n = [z_a·√(p0(1 − p0)) + z_b·√(p(1 − p))]² / (p − p0)²
    za, zb = stats.norm.ppf(0.95), stats.norm.ppf(0.8)
    raw = (za * math.sqrt(0.2 * 0.8) + zb * math.sqrt(0.35 * 0.65)) ** 2 / 0.15**2
    text = justification(record)
    assert f"{math.ceil(raw)} participants are needed before adjustment (unrounded {raw:.2f})" in (
        text
    )
    assert "found by exact search" not in text
    assert f"solved by the formula: {raw:.2f}, rounded up" in _page_text(record)


def test_exact_mcnemar_answer_says_it_was_searched():
    raw = posted(
        PAIRED,
        analysis="exact_mcnemar",
        target_power=0.8,
        effect={"p_treatment_only": 0.2},
        assumptions={"p_control_only": 0.08},
    )
    record = record_of(raw)
    n = record["sample_size"]["per_group"][0]
    text = justification(record)
    assert "unrounded" not in text
    assert (
        f"{n} pairs are needed before adjustment (found by exact search: the smallest number of "
        "pairs from which the exact test's power stays at or above the target"
    ) in text


def test_enumerated_two_group_answer_says_it_was_searched():
    raw = {
        "outcome": "binary",
        "layout": "two_groups",
        "analysis": "mn_score_unconditional",
        "alpha": 0.025,
        "target_power": 0.8,
        "hypothesis": {"aim": "noninferiority", "margin": -0.2, "higher_is_better": True},
        "effect": {"p_treatment": 0.9},
        "assumptions": {"p_control": 0.9},
    }
    record = record_of(raw)
    n = record["sample_size"]["per_group"][0]
    text = justification(record)
    assert "unrounded" not in text and f"{n}.00" not in text
    assert (
        f"{n} per group ({2 * n} in total) are needed before adjustment (found by exact search: "
        "the smallest whole control-group size whose power, enumerated over every possible "
        "outcome, reaches the target"
    ) in text


@pytest.mark.parametrize(
    "criterion, design, printed",
    [("optimal", (3, 13, 12, 43), "20.6"), ("minimax", (4, 18, 10, 33), "22.3")],
)
def test_simon_design_states_its_maximum_and_expected_size(criterion, design, printed):
    record = record_of(posted(SIMON, analysis_options={"criterion": criterion}))
    r1, n1, _, n = design
    # published: Simon (1989), Controlled Clin Trials 10:1, Table 1 (p0 .20, p1 .40, alpha .05,
    # power .80): optimal 3/13, 12/43 with EN(p0) 20.6, minimax 4/18, 10/33 with EN(p0) 22.3;
    # recomputed by the engine's enumeration, EN(p0) = n1 + (1 − P(X1 ≤ r1 | p0))·(n − n1)
    # (formula) with scipy's binomial.
    assert record["sample_size"]["per_group"] == [n]
    expected = n1 + stats.binom.sf(r1, n1, 0.2) * (n - n1)
    assert f"{expected:.1f}" == printed
    text = justification(record)
    assert "unrounded" not in text and f"{n}.00" not in text
    assert "adjustment" not in text  # the stage rules count evaluable patients; none is made
    assert (
        f"the {criterion} two-stage design enrolls {printed} participants on average when the "
        f"response rate is the uninteresting one, and at most {n} (found by exact search: the "
        "total size n of the design that best meets the design criterion among every two-stage "
        "design up to the searched maximum)."
    ) in text
    assert "unrounded" not in _page_text(record)
