"""The regression and diagnostic-accuracy examples through the API (calculations and requests,
a simulated one through a worker), the CLI, the report and the catalogue."""

from __future__ import annotations

import html
import json
import subprocess
import sys
from pathlib import Path

import pytest

from service.engine import canonical_json, compute, designs
from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from service.schemas import load_question
from tests.reports.reports_testkit import REQUEST
from workers.tasks import run_request_job

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "service" / "examples"
CELLS = [
    ("continuous", "regression"),
    ("binary", "regression"),
    ("time_to_event", "regression"),
    ("diagnostic", "two_groups"),
]


def _file(outcome: str, layout: str) -> Path:
    return EXAMPLES / designs.get(outcome, layout).example


@pytest.mark.parametrize(("outcome", "layout"), CELLS)
def test_example_through_api_cli_and_report(client, outcome, layout):
    question = json.loads(_file(outcome, layout).read_text())
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 200, r.get_json()
    api = r.get_json()
    record = compute(load_question(question))
    assert api["sample_size"] == record["sample_size"]

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(_file(outcome, layout))],
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
    assert str(record["sample_size"]["total"]) in page


@pytest.mark.parametrize(("outcome", "layout"), CELLS)
def test_example_as_a_request_computed_by_a_worker(api, app, outcome, layout):
    question = json.loads(_file(outcome, layout).read_text())
    queued = api.submit(api.request_body(question)).get_json()
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(queued["id"], config) == "computed"
    body = api.client.get(f"/v1/requests/{queued['id']}").get_json()
    assert canonical_json(body["result"]) == canonical_json(compute(body["question"]))


def test_simulated_linear_regression_request_through_a_worker(api, app):
    question = json.loads(_file("continuous", "regression").read_text())
    question.update(
        find="power",
        sample_size={"per_group": [150]},
        method="simulation",
        simulation={"replicates": 1000, "seed": 7},
    )
    question.pop("target_power", None)
    queued = api.submit(api.request_body(question)).get_json()
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(queued["id"], config) == "computed"
    body = api.client.get(f"/v1/requests/{queued['id']}").get_json()
    power = body["result"]["power"]
    assert power["replicates"] == 1000
    assert abs(power["estimate"] - power["analytic"]) < 4 * power["mcse"] + 0.02


def test_catalogue_lists_the_new_cells(client):
    cells = client.get("/v1/catalogue").get_json()["cells"]
    listed = {(c["outcome"], c["layout"]) for c in cells}
    assert set(CELLS) <= listed


def test_refusal_names_the_field(client):
    question = json.loads(_file("continuous", "regression").read_text())
    question["effect"] = {"r2_increment": 0.9}
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "effect.r2_increment" in json.dumps(r.get_json())


def test_sensitivity_specificity_precision_through_api_worker_cli_and_report(client, api, app):
    path = _file("diagnostic", "single_group")
    question = json.loads(path.read_text())
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 200, r.get_json()
    record = r.get_json()
    assert record["power"] is None
    assert record["precision"]["half_width_target"] == 0.05
    assert record["method"]["derived"]["governed_by"] in ("sensitivity", "specificity")

    queued = api.submit(api.request_body(question)).get_json()
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(queued["id"], config) == "computed"
    body = api.client.get(f"/v1/requests/{queued['id']}").get_json()
    assert body["result"]["sample_size"] == record["sample_size"]

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(path)], capture_output=True, text=True, cwd=ROOT, timeout=120
    )
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["sample_size"] == record["sample_size"]

    text = justification(record)
    assert designs.get("diagnostic", "single_group").label in text
    assert "sensitivity and the specificity" in text
    assert "each with a half-width of at most 0.05" in text  # two intervals, one target
    page = render_report(REQUEST, record, curve_svg="<svg></svg>")
    assert str(record["sample_size"]["total"]) in page

    refused = dict(question, hypothesis={"aim": "superiority"})
    r = client.post("/v1/calculations", json={"question": refused})
    assert r.status_code == 422
    assert "hypothesis.aim" in json.dumps(r.get_json())


def test_catalogue_lists_the_precision_cell(client):
    cells = client.get("/v1/catalogue").get_json()["cells"]
    listed = {(c["outcome"], c["layout"]) for c in cells}
    assert ("diagnostic", "single_group") in listed
