"""Assurance passes through the API, the CLI, the catalogue, the JSON Schema and the report."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

from reports_testkit import REQUEST

from service.engine import compute
from service.reports.justification import fmt_pct, justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from service.schemas import load_question
from service.schemas.catalogue import catalogue
from service.schemas.json_schema import question_json_schema

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "service" / "examples" / "northbridge_bp_trial_assurance.json"


def test_example_through_api_cli_and_report(client):
    question = json.loads(EXAMPLE.read_text())
    api = client.post("/v1/calculations", json={"question": question})
    assert api.status_code == 200, api.get_json()
    via_api = api.get_json()["assurance"]
    cli = subprocess.run(
        [sys.executable, "-m", "service.cli", "compute", str(EXAMPLE)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=300,
    )
    assert cli.returncode == 0, cli.stderr
    assert json.loads(cli.stdout)["assurance"] == via_api
    record = compute(load_question(question))
    text = justification(record)
    a = record["assurance"]
    assert "the assurance (probability of a significant result" in text
    assert fmt_pct(a["estimate"]) in text and fmt_pct(a["power"]) in text
    assert "Power assumes the effect is exactly the one stated" in text
    assert f"{a['target_per_group'][0]} per group analyzed" in text
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    assert "assurance" in page


def test_bad_prior_is_a_422_naming_the_field(client):
    question = json.loads(EXAMPLE.read_text())
    question["assurance"] = {"sd": 2.5}
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "assurance.mean" in json.dumps(r.get_json())


def test_declared_once_reaches_catalogue_and_json_schema():
    names = [f["name"] for f in catalogue()["blocks"]["assurance"]]
    assert names == ["mean", "sd", "lower", "upper", "target"]
    props = question_json_schema()["properties"]["assurance"]["properties"]
    assert set(props) == set(names)
