"""The interim-analyses example through the API, the CLI and the report (one pass each)."""

from __future__ import annotations

import json
import subprocess
import sys
from importlib import resources

from service.reports.render import render_report

EXAMPLE = "northbridge_bp_interim.json"


def _example() -> dict:
    return json.loads(resources.files("service.examples").joinpath(EXAMPLE).read_text("utf-8"))


def test_interim_example_through_api_cli_and_report(client, tmp_path):
    r = client.post("/v1/calculations", json={"question": _example()})
    assert r.status_code == 200, r.get_json()
    record = r.get_json()
    if "record" in record:
        record = record["record"]
    looks = record["sequential"]["looks"]
    assert len(looks) == 3 and looks[0]["efficacy_z"] > looks[-1]["efficacy_z"]

    path = tmp_path / "question.json"
    path.write_text(json.dumps(_example()))
    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "compute", str(path)],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    cli = json.loads(done.stdout)
    assert cli["sample_size"] == record["sample_size"]
    assert cli["sequential"] == record["sequential"]

    page = render_report({"id": "x", "status": "computed"}, cli, curve_svg="<svg></svg>")
    assert 'id="interim"' in page
    assert "Efficacy z" in page and "±3.710" in page
    assert "inflation factor" in page and "O&#39;Brien-Fleming-type" in page


def test_interim_refusal_is_a_problem_naming_the_field(client):
    question = {**_example(), "interim": {"looks": 3, "futility_spending": "pocock"}}
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "interim.futility_spending" in json.dumps(r.get_json())


def test_catalogue_lists_the_interim_block(client):
    body = client.get("/v1/catalogue").get_json()
    names = [f["name"] for f in body["blocks"]["interim"]]
    assert names[:3] == ["looks", "information_fractions", "efficacy_spending"]
    takes = {c["name"]: c["interim"] for c in body["cells"]}
    assert takes["continuous × two_groups"] and takes["time_to_event × two_groups"]
    assert not takes["continuous × k_groups"]


def test_interim_request_computed_by_the_worker_path(api, app):
    from service.engine import canonical_json, compute
    from workers.tasks import run_request_job

    queued = api.submit(api.request_body(_example()))
    assert queued.status_code == 202, queued.get_json()
    request_id = queued.get_json()["id"]
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(request_id, config) == "computed"
    stored = api.client.get(f"/v1/requests/{request_id}").get_json()
    assert stored["question"]["interim"]["looks"] == 3
    assert canonical_json(stored["result"]) == canonical_json(compute(stored["question"]))
    assert len(stored["result"]["sequential"]["looks"]) == 3


def test_robustness_panel_is_refused_for_interim_analyses(api):
    body = api.request_body(_example(), explorations=[{"type": "robustness_panel"}])
    r = api.submit(body)
    assert r.status_code == 422, r.get_json()
    assert "not offered for a question with interim analyses" in json.dumps(r.get_json())
