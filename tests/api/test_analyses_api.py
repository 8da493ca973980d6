"""Analyses over the API: asked with the request or later, validated, priced, run, reported.

Requests and analyses are computed in-process by the worker's own task functions (the queue is
the filesystem broker of the test settings). Demo data: Northbridge General Hospital, invented.
"""

from __future__ import annotations

import math

import pytest
from scipy import stats
from statsmodels.stats.power import TTestIndPower

from service.engine import estimate_cost
from service.schemas.question import load_question
from service.store.db import session_scope
from service.store.models import Analysis
from workers.analysis_tasks import run_analysis_job
from workers.tasks import run_request_job

PROBLEM = "application/problem+json"
QUESTION = {"design": "two_means", "find": "sample_size", "effect": {"difference": 0.5, "sd": 1.0}}
GRID = {"effect.difference": [0.4, 0.5, 0.6], "effect.sd": [1.0, 1.2]}
SOURCE = "SD from the 2024 Northbridge audit of clinic visits"


def _config(app) -> dict:
    return app.extensions["sizewise"]["config"]


def _compute(app, request_id: str) -> None:
    assert run_request_job(request_id, _config(app)) == "computed"


def _analyses(client, request_id: str) -> list[dict]:
    r = client.get(f"/v1/requests/{request_id}/analyses")
    assert r.status_code == 200, r.get_json()
    return r.get_json()["items"]


def _n_per_group(d: float) -> int:
    # formula: noncentral t, solved by statsmodels (two-sided .05, power .80)
    return math.ceil(TTestIndPower().solve_power(effect_size=d, alpha=0.05, power=0.8, ratio=1.0))


def test_analyses_and_effect_source_posted_with_the_request_run_after_it(app, client, api):
    body = api.request_body(
        QUESTION,
        effect_source=SOURCE,
        analyses={"sensitivity": {"grid": GRID}, "robustness": True},
    )
    r = api.submit(body)
    assert r.status_code == 202, r.get_json()
    detail = r.get_json()
    assert detail["effect_source"] == SOURCE
    assert [(a["kind"], a["status"]) for a in detail["analyses"]] == [
        ("sensitivity", "queued"),
        ("robustness", "queued"),
    ]
    request_id = detail["id"]
    # Not computed yet: the worker gives the analysis back without using an attempt.
    grid_id, panel_id = (a["id"] for a in detail["analyses"])
    assert run_analysis_job(grid_id, _config(app)) == "waiting"
    _compute(app, request_id)
    assert run_analysis_job(grid_id, _config(app)) == "done"
    assert run_analysis_job(panel_id, _config(app)) == "done"
    grid, panel = (a["result"] for a in _analyses(client, request_id))
    assert grid["shape"] == [3, 2]
    for cell in grid["cells"]:
        d = cell["values"]["effect.difference"] / cell["values"]["effect.sd"]
        assert cell["per_arm"] == [_n_per_group(d)] * 2, cell
    # published 64 per group at d = 0.5: Cohen 1988, Table 2.4.1
    assert grid["base"]["per_arm"] == [64, 64]
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    assert panel["per_arm"] == [64, 64]
    power = TTestIndPower().power(effect_size=0.5, nobs1=64, alpha=0.05, ratio=1.0)
    assert abs(normal["power"]["estimate"] - power) < 4 * normal["power"]["mcse"]  # recomputed

    page = client.get(f"/v1/requests/{request_id}/report").get_data(as_text=True)
    assert SOURCE in page  # the justification cites the posted source
    assert 'id="sensitivity"' in page and 'id="sensitivity-figure"' in page
    assert 'id="robustness"' in page and "sensitivity-line-1" in page


@pytest.mark.parametrize(
    "analyses,field,words",
    [
        (
            {"sensitivity": {"grid": {"effect.bogus": [1]}}},
            "analyses.sensitivity.grid.effect.bogus",
            "allowed: ",
        ),
        (
            {"sensitivity": {"grid": {"effect.difference": [0.4, "x"]}}},
            "analyses.sensitivity.grid.effect.difference.1",
            "got 'x'",
        ),
        ({"sensitivity": {"grid": {}}}, "analyses.sensitivity.grid", "non-empty"),
        (
            {"sensitivity": {"grid": {"effect.difference": [0.5]}, "extra": 1}},
            "analyses.sensitivity.extra",
            "unknown field",
        ),
        ({"robustness": "maybe"}, "analyses.robustness", "true or false; got 'maybe'"),
    ],
)
def test_bad_analyses_in_the_body_name_the_field(api, analyses, field, words):
    r = api.submit(api.request_body(QUESTION, analyses=analyses))
    assert r.status_code == 422 and r.mimetype == PROBLEM
    errors = r.get_json()["errors"]
    assert field in errors, errors
    assert any(words.lower() in m.lower() for m in errors[field]), errors[field]


def test_robustness_is_refused_for_other_designs_naming_the_design(api):
    question = {
        "design": "two_proportions",
        "find": "sample_size",
        "effect": {"p_control": 0.3, "p_treatment": 0.45},
    }
    r = api.submit(api.request_body(question, analyses={"robustness": True}))
    assert r.status_code == 422
    assert "'two_proportions'" in r.get_json()["errors"]["analyses.robustness"][0]


def test_posting_an_analysis_on_a_computed_request_publishes_it(app, client, api):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    _compute(app, request_id)
    r = api.post(
        f"/v1/requests/{request_id}/analyses",
        {"kind": "sensitivity", "grid": {"adjustments.dropout": [0.0, 0.2]}},
    )
    assert r.status_code == 202, r.get_json()
    analysis = r.get_json()
    assert analysis["status"] == "queued" and analysis["published_at"] is not None
    assert r.headers["Location"].endswith(f"/analyses/{analysis['id']}")
    assert run_analysis_job(analysis["id"], _config(app)) == "done"
    one = client.get(r.headers["Location"]).get_json()
    # dropout 20%: 64 / 0.8 = 80 per group (formula: n / (1 - dropout), rounded up)
    assert [c["per_arm"] for c in one["result"]["cells"]] == [[64, 64], [80, 80]]
    listed = client.get(f"/v1/requests/{request_id}").get_json()["analyses"]
    assert [a["id"] for a in listed] == [analysis["id"]] and "result" not in listed[0]


def test_an_analysis_of_a_request_not_yet_computed_waits_unpublished(api):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/analyses", {"kind": "robustness"})
    assert r.status_code == 202
    assert r.get_json()["published_at"] is None and r.get_json()["params"]["replicates"] == 5000


@pytest.mark.parametrize(
    "body,field,words",
    [
        ({"kind": "sensitivity"}, "grid", "required"),
        ({"kind": "forecast"}, "kind", "must be one of"),
        ({"kind": "robustness", "grid": {"alpha": [0.05]}}, "grid", "only for kind 'sensitivity'"),
        ({"kind": "robustness", "replicates": 10}, "replicates", "got 10"),
        (
            {"kind": "sensitivity", "grid": {"simulation.seed": [1]}},
            "grid.simulation.seed",
            "allowed",
        ),
    ],
)
def test_bad_analysis_bodies_name_the_field(api, body, field, words):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/analyses", body)
    assert r.status_code == 422 and r.mimetype == PROBLEM
    errors = r.get_json()["errors"]
    assert field in errors and words in " ".join(errors[field]), errors


def test_robustness_of_another_design_is_refused(api):
    question = {"design": "correlation", "find": "sample_size", "effect": {"r": 0.3}}
    request_id = api.submit(api.request_body(question)).get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/analyses", {"kind": "robustness"})
    assert r.status_code == 422
    assert "'correlation'" in r.get_json()["detail"] and r.get_json()["design"] == "correlation"


def test_a_grid_over_the_budget_is_refused_with_its_estimate(app, api):
    question = {
        "design": "two_means",
        "find": "power",
        "sample_size": {"per_arm": [40, 40]},
        "effect": {"difference": 0.5, "sd": 1.0},
        "method": "simulation",
        "simulation": {"replicates": 2000, "seed": 7},
    }
    request_id = api.submit(api.request_body(question)).get_json()["id"]
    differences = [0.3, 0.4, 0.5, 0.6]
    # The grid costs what its cells cost asked one by one (the engine's own estimate).
    expected = sum(
        estimate_cost(load_question(dict(question, effect={"difference": d, "sd": 1.0})))
        for d in differences
    )
    _config(app)["SIMULATION_BUDGET"] = expected - 1
    r = api.post(
        f"/v1/requests/{request_id}/analyses",
        {"kind": "sensitivity", "grid": {"effect.difference": differences}},
    )
    assert r.status_code == 422
    body = r.get_json()
    assert body["estimate"] == expected and body["budget"] == expected - 1
    assert f"{expected:,}" in body["errors"]["grid"][0]
    _config(app)["SIMULATION_BUDGET"] = expected
    r = api.post(
        f"/v1/requests/{request_id}/analyses",
        {"kind": "sensitivity", "grid": {"effect.difference": differences}},
    )
    assert r.status_code == 202


def test_no_analysis_of_a_cancelled_request(api):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    assert api.post(f"/v1/requests/{request_id}/cancel").status_code == 200
    r = api.post(f"/v1/requests/{request_id}/analyses", {"kind": "robustness"})
    assert r.status_code == 409 and r.get_json()["current_status"] == "cancelled"


def test_unknown_request_and_analysis_are_404(client, api):
    assert client.get("/v1/requests/" + "0" * 32 + "/analyses").status_code == 404
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    assert client.get(f"/v1/requests/{request_id}/analyses/{'0' * 32}").status_code == 404


def test_a_simulated_grid_keeps_the_requests_seed_in_every_cell(app, client, api):
    question = {
        "design": "two_means",
        "find": "power",
        "sample_size": {"per_arm": [30, 30]},
        "effect": {"difference": 0.5, "sd": 1.0},
        "method": "simulation",
        "simulation": {"replicates": 1000, "seed": 20250101, "chunk_size": 500},
    }
    body = api.request_body(
        question, analyses={"sensitivity": {"grid": {"effect.difference": [0.3, 0.6]}}}
    )
    detail = api.submit(body).get_json()
    _compute(app, detail["id"])
    assert run_analysis_job(detail["analyses"][0]["id"], _config(app)) == "done"
    grid = _analyses(client, detail["id"])[0]["result"]
    assert grid["method"] == "simulation" and grid["seed"] == 20250101
    for cell in grid["cells"]:
        d = cell["values"]["effect.difference"]
        exact = TTestIndPower().power(effect_size=d, nobs1=30, alpha=0.05, ratio=1.0)  # recomputed
        assert abs(cell["power"] - exact) < 4 * cell["mcse"], cell
    with session_scope(api.sessions()) as session:
        assert session.get(Analysis, detail["analyses"][0]["id"]).attempts == 1


def test_type_i_error_of_the_normal_departure_holds_alpha(app, client, api):
    body = api.request_body(QUESTION)
    request_id = api.submit(body).get_json()["id"]
    _compute(app, request_id)
    analysis_id = api.post(
        f"/v1/requests/{request_id}/analyses", {"kind": "robustness", "replicates": 2000}
    ).get_json()["id"]
    assert run_analysis_job(analysis_id, _config(app)) == "done"
    panel = _analyses(client, request_id)[0]["result"]
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    # The t test holds its size under normal data: 0.05 within a binomial 99.9% band
    # (formula; scipy.stats.binom).
    lo, hi = stats.binom.interval(0.999, 2000, 0.05)
    assert lo / 2000 <= normal["type_i_error"]["estimate"] <= hi / 2000
