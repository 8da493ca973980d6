"""Binary × two_groups on a ratio scale (Miettinen-Nurminen score test, exact enumerated power)
and ordinal × two_groups under proportional odds (Whitehead) through the API (calculations and
requests), the CLI, the report and the catalogue."""

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
FILES = [
    "northbridge_antibiotic_risk_ratio.json",
    "northbridge_eye_drops_odds_ratio.json",
    "northbridge_stroke_recovery_ordinal.json",
]
WORDS = {
    "northbridge_antibiotic_risk_ratio.json": "limit of 0.9 on the risk ratio",
    "northbridge_eye_drops_odds_ratio.json": "limit of 0.4 on the odds ratio",
    "northbridge_stroke_recovery_ordinal.json": "common odds ratio of 1.6",
}


@pytest.mark.parametrize("name", FILES)
def test_ratio_example_through_api_cli_and_report(client, name):
    question = json.loads((EXAMPLES / name).read_text())
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 200, r.get_json()
    api = r.get_json()
    record = compute(load_question(question))
    assert api["sample_size"] == record["sample_size"]
    assert api["power"]["estimate"] >= 0.8

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(EXAMPLES / name)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["sample_size"] == record["sample_size"]

    text = justification(record)
    design = designs.get(question["outcome"], question["layout"])
    assert design.label in text
    assert record["method"]["analysis_label"] in text
    assert WORDS[name] in text
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    label = record["method"]["analysis_label"]
    assert html.escape(label, quote=False).replace("'", "&#39;") in page


def test_request_of_a_ratio_question_is_stored_with_its_scale(api):
    question = json.loads((EXAMPLES / FILES[0]).read_text())
    r = api.submit(api.request_body(question))
    assert r.status_code == 202, r.get_json()
    body = r.get_json()
    assert body["question"]["analysis_options"]["scale"] == "risk_ratio"
    assert body["question"]["analysis"] == "mn_score"
    assert body["status"] in ("queued", "computed")
    if body["status"] == "computed":  # answered at submission
        assert body["result"]["sample_size"] == compute(body["question"])["sample_size"]


def test_catalogue_lists_the_scale_and_the_score_analyses(client):
    cells = client.get("/v1/catalogue").get_json()["cells"]
    [cell] = [c for c in cells if (c["outcome"], c["layout"]) == ("binary", "two_groups")]
    dumped = json.dumps(cell)
    for word in ("mn_score", "mn_score_enumerated", "risk_ratio", "odds_ratio"):
        assert word in dumped


def test_a_bad_scale_is_a_422_naming_the_field(client):
    question = json.loads((EXAMPLES / FILES[0]).read_text())
    question["analysis_options"]["scale"] = "log_odds"
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "analysis_options.scale" in json.dumps(r.get_json())


def test_a_ratio_scale_with_a_difference_analysis_is_a_422(client):
    question = json.loads((EXAMPLES / FILES[0]).read_text())
    question["analysis"] = "unpooled_z"
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422, r.get_json()
    assert "analysis_options.scale" in json.dumps(r.get_json())


def test_catalogue_lists_the_proportional_odds_analysis(client):
    cells = client.get("/v1/catalogue").get_json()["cells"]
    [cell] = [c for c in cells if (c["outcome"], c["layout"]) == ("ordinal", "two_groups")]
    dumped = json.dumps(cell)
    for word in ("proportional_odds", "odds_ratio", "category_probs"):
        assert word in dumped


def test_category_probabilities_off_one_are_a_422_naming_the_field(client):
    question = json.loads((EXAMPLES / FILES[2]).read_text())
    question["assumptions"]["category_probs"] = [0.2, 0.2, 0.2]
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    problem = r.get_json()
    assert "question.assumptions.category_probs" in problem["errors"]
    assert "sum to 1" in json.dumps(problem["errors"])
