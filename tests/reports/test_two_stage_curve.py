"""Simon's two-stage design has no power curve over sizes (its stage rules fix n): the report
draws the chosen design's exact power against the true response rate instead, with the type I
error and the power marked, and says why. Demo data: Northbridge (the phase II example),
invented."""

from __future__ import annotations

import html
import re

import pytest
from scipy import stats

from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from tests.posted import SIMON, record_of, simon_posted
from tests.reports.reports_testkit import REQUEST


def _promising(n1: int, r1: int, n: int, r: int, p: float) -> float:
    """P(more than r1 of n1 respond, then more than r of all n) by scipy, summed by hand."""
    return sum(
        stats.binom.pmf(x1, n1, p) * stats.binom.sf(r - x1, n - n1, p)
        for x1 in range(r1 + 1, n1 + 1)
    )


def _page_text(record: dict, svg: str) -> str:
    page = render_report(REQUEST, record, curve_svg=svg)
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def test_found_design_draws_its_exact_power_against_the_response_rate():
    record = record_of(SIMON)
    block = record["sample_size"]["details"]["two_stage"]
    # published: Simon (1989), Controlled Clin Trials 10:1, Table 1 (p0 .20, p1 .40, alpha .05,
    # power .80): the optimal design 3/13, 12/43; recomputed by the engine's enumeration.
    assert (block["r1"], block["n1"], block["r"], block["n"]) == (3, 13, 12, 43)
    points = curve_points(record)
    assert points["kind"] == "operating"
    assert points["x"][0] == 0.0 and points["x"][-1] == pytest.approx(0.6)
    assert len(points["x"]) >= 41 and None not in points["analytic"]  # a curve, not empty
    # general-purpose library: each point is scipy's two-stage sum at that rate
    for p, power in zip(points["x"][::8], points["analytic"][::8], strict=True):
        assert power == pytest.approx(_promising(13, 3, 43, 12, p), abs=1e-12)
    assert all(b >= a for a, b in zip(points["analytic"], points["analytic"][1:], strict=False))
    low, high = points["marks"]
    assert (low["x"], high["x"]) == (0.2, 0.4)
    assert low["power"] == pytest.approx(block["type_i_error"], abs=1e-12)
    assert high["power"] == pytest.approx(record["power"]["estimate"], abs=1e-12)
    assert low["label"] == f"uninteresting rate 0.2: type I error {block['type_i_error']:.4f}"
    assert high["label"] == f"rate worth pursuing 0.4: power {block['power']:.4f}"

    svg = power_curve_svg(points)
    for gid in ("analytic-curve", "rate-point-0", "rate-point-1", "target-line"):
        assert f'id="{gid}"' in svg, gid
    assert 'id="chosen-n"' not in svg
    assert "Power of the design r1/n1 = 3/13, r/n = 12/43 against the true response rate" in svg
    assert "True response rate" in svg

    text = _page_text(record, svg)
    assert (
        "The exact probability that the two-stage design (r1/n1 = 3/13, r/n = 12/43) calls the "
        "treatment promising, for each true response rate: at the uninteresting rate 0.2 it is "
        f"the type I error ({block['type_i_error']:.4f}), at the rate worth pursuing 0.4 the "
        f"power ({block['power']:.4f}). The design's size is fixed by its stage rules, so its "
        "power is drawn against the response rate, not against the enrolled size."
    ) in text
    assert "Power against the enrolled size" not in text


@pytest.mark.parametrize("method", ["analytic", "simulation"])
def test_posted_design_draws_its_own_curve(method):
    raw = simon_posted(18, 4, 33, 10, method=method)
    if method == "simulation":
        raw["simulation"] = {"replicates": 2000, "seed": 20261202}
    record = record_of(raw)
    points = curve_points(record)
    low, high = points["marks"]
    # published: Simon (1989), Table 1, the minimax design 4/18, 10/33 for p0 .20 / p1 .40;
    # its exact characteristics recomputed with scipy
    assert low["power"] == pytest.approx(_promising(18, 4, 33, 10, 0.2), abs=1e-12)
    assert high["power"] == pytest.approx(_promising(18, 4, 33, 10, 0.4), abs=1e-12)
    assert "r1/n1 = 4/18, r/n = 10/33" in points["title"]
    assert points["target_power"] is None
    text = _page_text(record, power_curve_svg(points))
    assert "so its power is drawn against the response rate" in text
    if method == "simulation":
        assert "The simulated power in the answer above estimates the exact power" in text
        assert "Simulated points show" not in text
