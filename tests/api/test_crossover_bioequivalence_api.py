"""The crossover, bioequivalence and ANCOVA examples through the API, the CLI and the report."""

from __future__ import annotations

import html
import json
import subprocess
import sys
from pathlib import Path

import pytest

from service.engine import compute, designs
from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from service.schemas import load_question
from tests.reports.reports_testkit import REQUEST

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "service" / "examples"
CELLS = [("continuous", "crossover"), ("lognormal", "crossover"), ("lognormal", "two_groups")]


def _example(outcome: str, layout: str) -> dict:
    return json.loads((EXAMPLES / _file(outcome, layout)).read_text())


def _file(outcome: str, layout: str) -> str:
    if (outcome, layout) == ("continuous", "two_groups"):
        return "northbridge_knee_pain_ancova.json"  # the baseline-adjusted analysis
    return designs.get(outcome, layout).example


@pytest.mark.parametrize(("outcome", "layout"), [*CELLS, ("continuous", "two_groups")])
def test_example_through_api_cli_and_report(client, outcome, layout):
    question = _example(outcome, layout)
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 200, r.get_json()
    api = r.get_json()
    record = compute(load_question(question))
    assert api["sample_size"] == record["sample_size"]

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(EXAMPLES / _file(outcome, layout))],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["sample_size"] == record["sample_size"]

    design = designs.get(outcome, layout)
    text = justification(record)
    assert design.label in text
    assert design.phrases.effect(record["question"], record) in text
    assert record["method"]["analysis_label"] in text
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    label = record["method"]["analysis_label"]
    assert html.escape(label, quote=False).replace("'", "&#39;") in page


def test_catalogue_lists_the_new_cells(client):
    cells = client.get("/v1/catalogue").get_json()["cells"]
    listed = {(c["outcome"], c["layout"]) for c in cells}
    assert set(CELLS) <= listed


def test_bioequivalence_refusal_names_the_field(client):
    question = _example("lognormal", "crossover")
    question["effect"]["ratio"] = 1.4  # outside 0.80–1.25
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "effect.ratio" in json.dumps(r.get_json())
