"""The power curve: data from the engine (checked against statsmodels), drawing found by id."""

import math
import xml.etree.ElementTree as ET

import pytest
from reports_testkit import answer
from statsmodels.stats.power import TTestIndPower

from service.engine import QuestionError
from service.reports.plots import curve_points, power_curve_png, power_curve_svg

_SVG = "{http://www.w3.org/2000/svg}"


def _ids(svg: str) -> dict[str, ET.Element]:
    root = ET.fromstring(svg)
    assert root.tag == f"{_SVG}svg"
    return {el.get("id"): el for el in root.iter() if el.get("id")}


@pytest.fixture(scope="module")
def plain_record():
    return answer()


def test_analytic_curve_matches_statsmodels(plain_record):
    points = curve_points(plain_record)
    chosen = plain_record["sample_size"]["per_group"][0]
    assert chosen == 64  # published 64: Cohen 1988, Table 2.4.1
    assert chosen in points["n"] and 11 <= len(points["n"]) <= 14
    assert min(points["n"]) == math.floor(0.5 * chosen) and max(points["n"]) == math.ceil(
        1.5 * chosen
    )
    for n, power in zip(points["n"], points["analytic"], strict=True):
        # formula: noncentral t power (statsmodels TTestIndPower, recomputed)
        assert power == pytest.approx(
            TTestIndPower().power(effect_size=0.5, nobs1=n, alpha=0.05), abs=1e-9
        )
    assert points["analytic"] == sorted(points["analytic"])
    assert points["simulated"] == [] and points["target_power"] == 0.8
    assert points["chosen"] == {"n": 64, "power": plain_record["power"]["estimate"]}


def test_curve_with_dropout_is_on_the_enrolled_scale(analytic_record):
    points = curve_points(analytic_record)
    chosen = analytic_record["sample_size"]["per_group"][0]
    i = points["n"].index(chosen)
    # the enrolled answer, less dropout and design effect, powers at least the target
    assert points["analytic"][i] >= 0.8
    assert points["analytic"][0] < 0.8


def test_simulated_points_bracket_the_exact_power(simulated_record):
    points = curve_points(simulated_record, replicates=400)
    assert (
        points["replicates"] == 400
        and points["seed"] == simulated_record["question"]["simulation"]["seed"]
    )
    sim = points["simulated"]
    assert len(sim) == len(points["n"])
    covered = 0
    for p in sim:
        lo, hi = p["ci95"]
        assert lo <= p["power"] <= hi
        # formula: noncentral t at the analyzed n (10% dropout removed, floored as the engine does)
        analyzed = math.floor(p["n"] * 0.9 + 1e-9)
        exact = TTestIndPower().power(effect_size=0.5, nobs1=analyzed, alpha=0.05)
        covered += lo <= exact <= hi
    # 95% intervals: nearly all of ~13 points cover the exact power (a loose, non-flaky bound)
    assert covered >= len(sim) - 3
    assert len(points["analytic"]) == len(points["n"])  # the normal model has a formula beside it


def test_svg_has_target_line_and_chosen_n(simulated_record):
    points = curve_points(simulated_record, replicates=300)
    svg = power_curve_svg(points)
    ids = _ids(svg)
    for gid in (
        "target-line",
        "chosen-n",
        "chosen-point",
        "analytic-curve",
        "simulated-points",
        "curve-title",
    ):
        assert gid in ids, gid
    assert not svg.startswith("<?xml")  # ready to inline in HTML
    assert power_curve_svg(points) == svg  # identical data, identical drawing


def test_power_question_has_no_target_line(simulated_power_record):
    ids = _ids(power_curve_svg(curve_points(simulated_power_record, replicates=300)))
    assert "target-line" not in ids and "chosen-n" in ids


def test_png_is_a_png(plain_record):
    png = power_curve_png(curve_points(plain_record))
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 10_000


@pytest.mark.parametrize(
    ("kwargs", "field"), [({"points": 1}, "points"), ({"span": (1.2, 1.5)}, "span")]
)
def test_bad_curve_options(plain_record, kwargs, field):
    with pytest.raises(QuestionError) as info:
        curve_points(plain_record, **kwargs)
    assert info.value.field == field and "got" in info.value.message
