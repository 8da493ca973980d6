"""Through the API and the worker path: a simulated interim question (the sequential test
simulated, seqsim.py) and the binary treatments-against-control cell (catalogue, request)."""

from __future__ import annotations

import json
from importlib import resources

from service.engine import canonical_json, compute
from service.schemas import load_question

SIMULATED_INTERIM = {
    "outcome": "continuous",
    "layout": "two_groups",
    "find": "power",
    "alpha": 0.05,
    "effect": {"difference": -5.0},
    "assumptions": {"sd": 12.0},
    "sample_size": {"per_group": [124, 124]},
    "interim": {"looks": 3},
    "method": "simulation",
    "simulation": {"replicates": 2000, "seed": 13, "chunk_size": 500},
}


def _binary_example() -> dict:
    name = "northbridge_wound_dressings_three_arm.json"
    return json.loads(resources.files("service.examples").joinpath(name).read_text("utf-8"))


def test_simulated_interim_request_computed_by_the_worker_path(api, app):
    from workers.tasks import run_request_job

    queued = api.submit(api.request_body(SIMULATED_INTERIM))
    assert queued.status_code == 202, queued.get_json()
    request_id = queued.get_json()["id"]
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(request_id, config) == "computed"
    stored = api.client.get(f"/v1/requests/{request_id}").get_json()
    assert canonical_json(stored["result"]) == canonical_json(compute(stored["question"]))
    block = stored["result"]["sequential"]
    assert block["method"] == "simulation" and block["replicates"] == 2000
    assert len(block["looks"]) == 3


def test_simulated_interim_futility_is_a_problem_naming_the_field(client):
    question = {
        **SIMULATED_INTERIM,
        "alternative": "one-sided",
        "alpha": 0.025,
        "interim": {"looks": 3, "futility_spending": "pocock"},
    }
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "interim.futility_spending" in json.dumps(r.get_json())


def test_binary_treatments_vs_control_in_catalogue_and_answered(api, app, client):
    from workers.tasks import run_request_job

    cells = client.get("/v1/catalogue").get_json()["cells"]
    listed = {(c["outcome"], c["layout"]) for c in cells}
    assert ("binary", "treatments_vs_control") in listed
    example = _binary_example()
    r = client.post("/v1/calculations", json={"question": example})
    assert r.status_code == 200, r.get_json()
    record = r.get_json()
    assert record["sample_size"] == compute(load_question(example))["sample_size"]
    assert record["method"]["analysis"] == "dunnett"
    queued = api.submit(api.request_body(example))
    assert queued.status_code == 202, queued.get_json()
    request_id = queued.get_json()["id"]
    assert run_request_job(request_id, app.extensions["sizewise"]["config"]) == "computed"
    stored = api.client.get(f"/v1/requests/{request_id}").get_json()
    assert stored["result"]["sample_size"] == record["sample_size"]


def test_binary_treatments_vs_control_simulated_request_by_the_worker(api, app):
    from workers.tasks import run_request_job

    question = {
        **_binary_example(),
        "find": "power",
        "target_power": None,
        "adjustments": None,
        "analysis": "hochberg",
        "sample_size": {"per_group": [120, 70, 70, 70]},
        "method": "simulation",
        "simulation": {"replicates": 2000, "seed": 17, "chunk_size": 500},
    }
    queued = api.submit(api.request_body(question))
    assert queued.status_code == 202, queued.get_json()
    request_id = queued.get_json()["id"]
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(request_id, config) == "computed"
    stored = api.client.get(f"/v1/requests/{request_id}").get_json()
    assert canonical_json(stored["result"]) == canonical_json(compute(stored["question"]))
    assert stored["result"]["method"]["analysis"] == "hochberg"


def test_holm_for_many_comparisons_through_the_api(client):
    question = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "target_power": 0.8,
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "adjustments": {"comparisons": 4, "multiplicity": "holm"},
    }
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 200, r.get_json()
    block = r.get_json()["multiplicity"]
    assert block["procedure"] == "holm" and block["comparisons"] == 4
    assert block["power"]["all"]["estimate"] > block["bonferroni"]["all"]["estimate"]
    question["adjustments"] = {"comparisons": 4, "comparisons_correlation": 0.3}
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "adjustments.comparisons_correlation" in json.dumps(r.get_json())
