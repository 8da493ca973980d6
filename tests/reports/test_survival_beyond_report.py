"""The two new time-to-event examples (delayed effect, noninferiority on the hazard ratio) pass
through the API, the CLI and the report."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from reports_testkit import REQUEST

from service.engine import compute
from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from service.schemas import load_question

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "service" / "examples"
FILES = (
    "northbridge_immunotherapy_delayed_effect.json",
    "northbridge_anticoagulant_noninferiority.json",
)


@pytest.mark.parametrize("name", FILES)
def test_example_through_api_cli_and_report(client, name):
    question = json.loads((EXAMPLES / name).read_text())
    api = client.post("/v1/calculations", json={"question": question})
    assert api.status_code == 200, api.get_json()
    via_api = api.get_json()

    cli = subprocess.run(
        [sys.executable, "-m", "service.cli", "compute", str(EXAMPLES / name)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=300,
    )
    assert cli.returncode == 0, cli.stderr
    via_cli = json.loads(cli.stdout)
    assert via_cli["sample_size"] == via_api["sample_size"]
    assert via_cli["events"]["calendar_time"] == pytest.approx(via_api["events"]["calendar_time"])

    record = compute(load_question(question))
    text = justification(record)
    unit = question["assumptions"]["time_unit"]
    assert f"{record['sample_size']['per_group'][0]:,} per group" in text
    assert f"{round(record['events']['calendar_time'], 1):g} {unit} after" in text
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    assert "Time to event, two groups" in page


def test_delayed_effect_report_words():
    question = json.loads((EXAMPLES / FILES[0]).read_text())
    text = justification(compute(load_question(question)))
    assert "no treatment effect (hazard ratio 1) during the first 3 months" in text
    assert "events are expected" in text  # the drift sets N; events follow from it
    assert "Lakatos (1988)" in text


def test_noninferiority_report_words():
    question = json.loads((EXAMPLES / FILES[1]).read_text())
    text = justification(compute(load_question(question)))
    assert "hazard-ratio margin of 1.3" in text
    assert "events are required" in text
