"""The sensitivity grid drawn as curves: one line per value of the second axis, found by gid."""

import math
import xml.etree.ElementTree as ET

import pytest
from reports_testkit import REQUEST, question
from statsmodels.stats.power import TTestIndPower

from service.engine.explore import sensitivity
from service.reports import describe
from service.reports.plots import curve_points, power_curve_svg, sensitivity_lines, sensitivity_svg
from service.reports.render import render_report

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def grid() -> dict:
    return sensitivity(
        question(), {"effect.difference": [0.4, 0.5, 0.6], "assumptions.sd": [1.0, 1.25]}
    )


def test_lines_follow_the_first_axis_one_per_second_axis_value(grid):
    q = question()
    data = sensitivity_lines(grid, q)
    # the axes are named by the cell's own field labels, never by the raw path
    sd, difference = describe.field_label(q, "sd"), describe.field_label(q, "difference")
    assert [line["label"] for line in data["lines"]] == [f"{sd} 1", f"{sd} 1.25"]
    assert data["x_label"] == difference.capitalize() and data["y_label"] == "Enrolled per group"
    for line, sd in zip(data["lines"], (1.0, 1.25), strict=True):
        assert line["x"] == [0.4, 0.5, 0.6]
        # formula: noncentral t solved by statsmodels TTestIndPower (two-sided .05, power .80)
        expected = [
            math.ceil(TTestIndPower().solve_power(effect_size=d / sd, alpha=0.05, power=0.8))
            for d in line["x"]
        ]
        assert line["y"] == expected


def test_svg_carries_a_title_and_one_path_per_line(grid):
    q = question()
    root = ET.fromstring(sensitivity_svg(grid, q))
    difference = describe.field_label(q, "difference")
    assert root.find(f"{SVG}title").text.startswith(f"Enrolled per group against {difference}")
    gids = {el.get("id") for el in root.iter() if el.get("id")}
    assert {"sensitivity-axes", "sensitivity-line-0", "sensitivity-line-1"} <= gids
    assert "sensitivity-line-2" not in gids


def test_a_power_grid_is_drawn_as_power():
    q = question(find="power", sample_size={"per_group": [40, 40]})
    data = sensitivity_lines(sensitivity(q, {"adjustments.dropout": [0.0, 0.1, 0.2]}), q)
    assert data["y_label"] == "Power" and [line["label"] for line in data["lines"]] == ["as asked"]
    ys = data["lines"][0]["y"]
    assert ys == sorted(ys, reverse=True)  # more dropout, less power (formula: n·(1 − q) analyzed)
    # no dropout: TTestIndPower at d = 0.5, n = 40 per group (statsmodels)
    assert ys[0] == pytest.approx(
        TTestIndPower().power(effect_size=0.5, nobs1=40, alpha=0.05), abs=1e-6
    )


def test_refused_cells_are_gaps():
    q = question()
    data = sensitivity_lines(sensitivity(q, {"effect.difference": [0.0, 0.5]}), q)
    assert (
        data["lines"][0]["y"][0] is None and data["lines"][0]["y"][1] == 64
    )  # Cohen 1988, Table 2.4.1


def test_report_shows_the_grid_as_table_and_curves_and_pending_explorations(analytic_record, grid):
    page = render_report(
        REQUEST,
        analytic_record,
        curve_svg=power_curve_svg(curve_points(analytic_record)),
        sensitivity=grid,
        sensitivity_svg=sensitivity_svg(grid, analytic_record["question"]),
        pending=[{"type": "robustness_panel", "status": "queued"}],
    )
    assert 'id="sensitivity-figure"' in page and "sensitivity-line-1" in page
    assert "Robustness panel: queued" in page
    assert REQUEST["context"]["effect_source"] in page
    # the grid's columns are named by the cell's field labels, never by the dotted path
    q = analytic_record["question"]
    for path in ("effect.difference", "assumptions.sd"):
        assert f">{describe.path_label(q, path).capitalize()}</th>" in page
        assert path not in page.split('id="sensitivity"')[1].split("</table>")[0]


def test_a_two_stage_grid_shows_each_cells_stage_rules():
    # published: Simon (1989), Controlled Clin Trials 10:1, Table 1: p0 0.20, p1 0.40, alpha .05,
    # power .80: the optimal design is r1/n1 = 3/13, r/n = 12/43, E(N | p0) = 20.6. A grid over
    # p re-solves the design, so each row must say which design it found, not only its maximum.
    from json import loads
    from pathlib import Path

    from service.schemas import load_question
    from tests.posted import record_of

    posted = loads(
        (
            Path(__file__).resolve().parents[2]
            / "service/examples/northbridge_phase2_two_stage.json"
        ).read_text()
    )
    q = load_question(posted)
    grid = sensitivity(q, {"effect.p": [0.35, 0.4]})
    record = record_of(posted)
    page = render_report(
        REQUEST, record, curve_svg=power_curve_svg(curve_points(record)), sensitivity=grid
    )
    table = page.split('id="sensitivity"')[1].split("</table>")[0]
    assert "Stage rules r1/n1, r/n" in table
    rows = table.split("<tr>")[2:]
    published = next(r for r in rows if ">0.4<" in r)
    assert "3/13, 12/43" in published and "20.6" in published and ">43<" in published
    other = next(r for r in rows if ">0.35<" in r)
    d = grid["cells"][0]["details"]["two_stage"]  # the engine's own design at p = 0.35
    assert f"{d['r1']}/{d['n1']}, {d['r']}/{d['n']}" in other
