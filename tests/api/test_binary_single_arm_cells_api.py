"""The binary single-group, two-stage and paired examples through the API (calculations and
requests, a simulation through the worker's task), the CLI, the catalogue and the report."""

from __future__ import annotations

import copy
import html
import json
import subprocess
import sys
from pathlib import Path

import pytest

from service.engine import compute, designs, verify
from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from service.schemas import load_question
from tests.reports.reports_testkit import REQUEST
from workers.tasks import run_request_job

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "service" / "examples"
CELLS = [("binary", "single_group"), ("binary", "two_stage"), ("binary", "paired")]
# a phrase of the cell's own details sentence, in the justification of its example
DETAIL_WORDS = {
    ("binary", "single_group"): "saw-toothed",
    ("binary", "two_stage"): "stop if 3 or fewer respond",
    ("binary", "paired"): "206 pairs are needed",
}
# a posted design for the simulated find = power request (Simon 1989, Table 1, minimax)
POSTED = {
    ("binary", "two_stage"): {
        "sample_size": {"per_group": [33]},
        "analysis_options": {"stage1_size": 18, "stage1_max_responses": 4, "max_responses": 10},
    }
}


def _example(outcome: str, layout: str) -> dict:
    return json.loads((EXAMPLES / designs.get(outcome, layout).example).read_text())


@pytest.mark.parametrize(("outcome", "layout"), CELLS)
def test_example_through_api_cli_and_report(client, outcome, layout):
    question = _example(outcome, layout)
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 200, r.get_json()
    api = r.get_json()
    record = compute(load_question(question))
    assert api["sample_size"] == record["sample_size"]
    assert verify(api)

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(EXAMPLES / designs.get(outcome, layout).example)],
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
    assert DETAIL_WORDS[(outcome, layout)] in text
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    label = record["method"]["analysis_label"]
    assert html.escape(label, quote=False).replace("'", "&#39;") in page
    assert str(record["sample_size"]["total"]) in page


@pytest.mark.parametrize(("outcome", "layout"), CELLS)
def test_simulated_request_is_computed_by_the_worker_task(api, app, outcome, layout):
    question = _example(outcome, layout)
    question.update(
        find="power",
        sample_size={"per_group": [40]},
        method="simulation",
        simulation={"replicates": 2000, "seed": 7},
    )
    question.update(POSTED.get((outcome, layout), {}))
    question.pop("target_power", None)
    queued = api.submit(api.request_body(question))
    assert queued.status_code == 202, queued.get_json()
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(queued.get_json()["id"], config) == "computed"
    done = api.client.get(f"/v1/requests/{queued.get_json()['id']}").get_json()
    result = done["result"]
    assert result["method"]["method"] == "simulation"
    power = result["power"]
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power


def test_catalogue_lists_the_new_cells(client):
    cells = client.get("/v1/catalogue").get_json()["cells"]
    listed = {(c["outcome"], c["layout"]) for c in cells}
    assert set(CELLS) <= listed


def test_single_group_refusal_names_the_field(client):
    question = _example("binary", "single_group")
    bad = copy.deepcopy(question)
    bad["effect"]["p"] = 1.5
    r = client.post("/v1/calculations", json={"question": bad})
    assert r.status_code == 422
    assert "effect.p" in json.dumps(r.get_json())
    same = copy.deepcopy(question)
    same["effect"]["p"] = same["assumptions"]["p_null"]
    r = client.post("/v1/calculations", json={"question": same})
    assert r.status_code == 422
    assert "effect.p" in json.dumps(r.get_json())


def test_two_stage_refusals_name_the_field(client):
    question = _example("binary", "two_stage")
    r = client.post("/v1/calculations", json={"question": {**question, "alternative": "two-sided"}})
    assert r.status_code == 422
    assert "question.alternative" in r.get_json()["errors"]
    r = client.post(
        "/v1/calculations",
        json={
            "question": {
                **question,
                "find": "effect",
                "sample_size": {"per_group": [40]},
                "effect": {},
            }
        },
    )
    assert r.status_code == 422, r.get_json()
    assert "find = effect is not offered" in json.dumps(r.get_json())
