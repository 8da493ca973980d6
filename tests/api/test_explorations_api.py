"""Explorations over the API: asked with the request or later, validated, priced, run, reported.

Requests and explorations are computed in-process by the worker's own task functions (the queue is
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
from service.store.models import Exploration
from tests.conftest import question_body
from workers.exploration_tasks import run_exploration_job
from workers.tasks import run_request_job

PROBLEM = "application/problem+json"
QUESTION = question_body()  # continuous outcome, two groups, d = 0.5
GRID = {"effect.difference": [0.4, 0.5, 0.6], "assumptions.sd": [1.0, 1.2]}
SOURCE = "SD from the 2024 Northbridge audit of clinic visits"


def _config(app) -> dict:
    return app.extensions["sizewise"]["config"]


def _compute(app, request_id: str) -> None:
    assert run_request_job(request_id, _config(app)) == "computed"


def _explorations(client, request_id: str) -> list[dict]:
    r = client.get(f"/v1/requests/{request_id}/explorations")
    assert r.status_code == 200, r.get_json()
    return r.get_json()["items"]


def _n_per_group(d: float) -> int:
    # formula: noncentral t, solved by statsmodels (two-sided .05, power .80)
    return math.ceil(TTestIndPower().solve_power(effect_size=d, alpha=0.05, power=0.8, ratio=1.0))


def test_explorations_and_effect_source_posted_with_the_request_run_after_it(app, client, api):
    body = api.request_body(
        QUESTION,
        effect_source=SOURCE,
        explorations=[{"type": "sensitivity_grid", "grid": GRID}, {"type": "robustness_panel"}],
    )
    r = api.submit(body)
    assert r.status_code == 202, r.get_json()
    detail = r.get_json()
    assert detail["effect_source"] == SOURCE
    assert [(e["type"], e["status"]) for e in detail["explorations"]] == [
        ("sensitivity_grid", "queued"),
        ("robustness_panel", "queued"),
    ]
    request_id = detail["id"]
    # Not computed yet: the worker gives the exploration back without using an attempt.
    grid_id, panel_id = (e["id"] for e in detail["explorations"])
    assert run_exploration_job(grid_id, _config(app)) == "waiting"
    _compute(app, request_id)
    assert run_exploration_job(grid_id, _config(app)) == "done"
    assert run_exploration_job(panel_id, _config(app)) == "done"
    grid, panel = (e["result"] for e in _explorations(client, request_id))
    assert grid["shape"] == [3, 2]
    for cell in grid["cells"]:
        d = cell["values"]["effect.difference"] / cell["values"]["assumptions.sd"]
        assert cell["per_group"] == [_n_per_group(d)] * 2, cell
    # published 64 per group at d = 0.5: Cohen 1988, Table 2.4.1
    assert grid["base"]["per_group"] == [64, 64]
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    assert panel["per_group"] == [64, 64]
    power = TTestIndPower().power(effect_size=0.5, nobs1=64, alpha=0.05, ratio=1.0)
    assert abs(normal["power"]["estimate"] - power) < 4 * normal["power"]["mcse"]  # recomputed

    page = client.get(f"/v1/requests/{request_id}/report").get_data(as_text=True)
    assert SOURCE in page  # the justification cites the posted source
    assert 'id="sensitivity"' in page and 'id="sensitivity-figure"' in page
    assert 'id="robustness"' in page and "sensitivity-line-1" in page


@pytest.mark.parametrize(
    "explorations,field,words",
    [
        (
            [{"type": "sensitivity_grid", "grid": {"effect.bogus": [1]}}],
            "explorations.0.grid.effect.bogus",
            "allowed: ",
        ),
        (
            [{"type": "robustness_panel"}, {"type": "sensitivity_grid", "grid": {"alpha": ["x"]}}],
            "explorations.1.grid.alpha.0",
            "got 'x'",
        ),
        ([{"type": "sensitivity_grid", "grid": {}}], "explorations.0.grid", "non-empty"),
        (
            [{"type": "sensitivity_grid", "grid": {"effect.difference": [0.5]}, "extra": 1}],
            "explorations.0.extra",
            "unknown field",
        ),
        ([{"type": "forecast"}], "explorations.0.type", "sensitivity_grid, robustness_panel"),
        ({"type": "robustness_panel"}, "explorations", "list"),
    ],
)
def test_bad_explorations_in_the_body_name_the_field(api, explorations, field, words):
    r = api.submit(api.request_body(QUESTION, explorations=explorations))
    assert r.status_code == 422 and r.mimetype == PROBLEM
    errors = r.get_json()["errors"]
    assert field in errors, errors
    assert any(words.lower() in m.lower() for m in errors[field]), errors[field]


def test_a_robustness_panel_is_refused_for_other_cells_naming_the_cell(api):
    question = {
        "outcome": "binary",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"p_treatment": 0.45},
        "assumptions": {"p_control": 0.3},
    }
    r = api.submit(api.request_body(question, explorations=[{"type": "robustness_panel"}]))
    assert r.status_code == 422
    assert "binary" in r.get_json()["errors"]["explorations.0.type"][0].lower()


def test_posting_an_exploration_on_a_computed_request_publishes_it(app, client, api):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    _compute(app, request_id)
    r = api.post(
        f"/v1/requests/{request_id}/explorations",
        {"type": "sensitivity_grid", "grid": {"adjustments.dropout": [0.0, 0.2]}},
    )
    assert r.status_code == 202, r.get_json()
    exploration = r.get_json()
    assert exploration["status"] == "queued" and exploration["published_at"] is not None
    assert exploration["type"] == "sensitivity_grid"
    assert r.headers["Location"].endswith(f"/explorations/{exploration['id']}")
    assert run_exploration_job(exploration["id"], _config(app)) == "done"
    one = client.get(r.headers["Location"]).get_json()
    # dropout 20%: 64 / 0.8 = 80 per group (formula: n / (1 - dropout), rounded up)
    assert [c["per_group"] for c in one["result"]["cells"]] == [[64, 64], [80, 80]]
    listed = client.get(f"/v1/requests/{request_id}").get_json()["explorations"]
    assert [e["id"] for e in listed] == [exploration["id"]] and "result" not in listed[0]


def test_the_same_item_shape_is_taken_with_the_request_and_later(app, client, api):
    item = {"type": "sensitivity_grid", "grid": {"adjustments.dropout": [0.0, 0.2]}}
    detail = api.submit(api.request_body(QUESTION, explorations=[item])).get_json()
    _compute(app, detail["id"])
    later = api.post(f"/v1/requests/{detail['id']}/explorations", item).get_json()
    early = detail["explorations"][0]
    assert (early["type"], early["params"]) == (later["type"], later["params"])
    for exploration_id in (early["id"], later["id"]):
        assert run_exploration_job(exploration_id, _config(app)) == "done"
    first, second = (e["result"] for e in _explorations(client, detail["id"]))
    assert first == second


def test_an_exploration_of_a_request_not_yet_computed_waits_unpublished(api):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/explorations", {"type": "robustness_panel"})
    assert r.status_code == 202
    assert r.get_json()["published_at"] is None and r.get_json()["params"]["replicates"] == 5000


@pytest.mark.parametrize(
    "body,field,words",
    [
        ({"type": "sensitivity_grid"}, "grid", "required"),
        ({"type": "forecast"}, "type", "must be one of"),
        (
            {"type": "robustness_panel", "grid": {"alpha": [0.05]}},
            "grid",
            "applies to type sensitivity_grid only",
        ),
        ({"type": "robustness_panel", "replicates": 10}, "replicates", "got 10"),
        (
            {"type": "sensitivity_grid", "grid": {"alpha": [0.05]}, "replicates": 500},
            "replicates",
            "applies to type robustness_panel only",
        ),
        (
            {"type": "sensitivity_grid", "grid": {"simulation.seed": [1]}},
            "grid.simulation.seed",
            "allowed",
        ),
        ({"kind": "sensitivity_grid"}, "type", "required"),
    ],
)
def test_bad_exploration_bodies_name_the_field(api, body, field, words):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/explorations", body)
    assert r.status_code == 422 and r.mimetype == PROBLEM
    errors = r.get_json()["errors"]
    assert field in errors and words in " ".join(errors[field]), errors


def test_a_robustness_panel_of_another_cell_is_refused_on_its_type(api):
    question = {
        "outcome": "association",
        "layout": "single_group",
        "find": "sample_size",
        "effect": {"r": 0.3},
    }
    request_id = api.submit(api.request_body(question)).get_json()["id"]
    r = api.post(f"/v1/requests/{request_id}/explorations", {"type": "robustness_panel"})
    assert r.status_code == 422
    assert "association" in r.get_json()["errors"]["type"][0].lower()


def test_a_grid_over_the_budget_is_refused_with_its_estimate(app, api):
    question = question_body(
        find="power",
        sample_size={"per_group": [40, 40]},
        method="simulation",
        simulation={"replicates": 2000, "seed": 7},
    )
    request_id = api.submit(api.request_body(question)).get_json()["id"]
    differences = [0.3, 0.4, 0.5, 0.6]
    # The grid costs what its cells cost asked one by one (the engine's own estimate).
    expected = sum(
        estimate_cost(load_question(dict(question, effect={"difference": d}))) for d in differences
    )
    _config(app)["SIMULATION_BUDGET"] = expected - 1
    r = api.post(
        f"/v1/requests/{request_id}/explorations",
        {"type": "sensitivity_grid", "grid": {"effect.difference": differences}},
    )
    assert r.status_code == 422
    body = r.get_json()
    assert body["estimate"] == expected and body["budget"] == expected - 1
    assert f"{expected:,}" in body["errors"]["grid"][0]
    _config(app)["SIMULATION_BUDGET"] = expected
    r = api.post(
        f"/v1/requests/{request_id}/explorations",
        {"type": "sensitivity_grid", "grid": {"effect.difference": differences}},
    )
    assert r.status_code == 202


def test_no_exploration_of_a_cancelled_request(api):
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    assert api.post(f"/v1/requests/{request_id}/cancel").status_code == 200
    r = api.post(f"/v1/requests/{request_id}/explorations", {"type": "robustness_panel"})
    assert r.status_code == 409 and r.get_json()["current_status"] == "cancelled"


def test_unknown_request_and_exploration_are_404(client, api):
    assert client.get("/v1/requests/" + "0" * 32 + "/explorations").status_code == 404
    request_id = api.submit(api.request_body(QUESTION)).get_json()["id"]
    assert client.get(f"/v1/requests/{request_id}/explorations/{'0' * 32}").status_code == 404


def test_a_simulated_grid_keeps_the_requests_seed_in_every_cell(app, client, api):
    question = question_body(
        find="power",
        sample_size={"per_group": [30, 30]},
        method="simulation",
        simulation={"replicates": 1000, "seed": 20250101, "chunk_size": 500},
    )
    body = api.request_body(
        question,
        explorations=[{"type": "sensitivity_grid", "grid": {"effect.difference": [0.3, 0.6]}}],
    )
    detail = api.submit(body).get_json()
    _compute(app, detail["id"])
    assert run_exploration_job(detail["explorations"][0]["id"], _config(app)) == "done"
    grid = _explorations(client, detail["id"])[0]["result"]
    assert grid["method"] == "simulation" and grid["seed"] == 20250101
    for cell in grid["cells"]:
        d = cell["values"]["effect.difference"]
        exact = TTestIndPower().power(effect_size=d, nobs1=30, alpha=0.05, ratio=1.0)  # recomputed
        assert abs(cell["power"] - exact) < 4 * cell["mcse"], cell
    with session_scope(api.sessions()) as session:
        assert session.get(Exploration, detail["explorations"][0]["id"]).attempts == 1


def test_type_i_error_of_the_normal_departure_holds_alpha(app, client, api):
    # A simulated question lends the panel its seed, so the draws (and this check) are fixed;
    # an analytic one would have the panel draw a fresh seed each run.
    question = question_body(
        find="power",
        sample_size={"per_group": [64, 64]},
        method="simulation",
        simulation={"replicates": 2000, "seed": 20261202},
    )
    body = api.request_body(question)
    request_id = api.submit(body).get_json()["id"]
    _compute(app, request_id)
    exploration_id = api.post(
        f"/v1/requests/{request_id}/explorations", {"type": "robustness_panel", "replicates": 2000}
    ).get_json()["id"]
    assert run_exploration_job(exploration_id, _config(app)) == "done"
    panel = _explorations(client, request_id)[0]["result"]
    assert panel["seed"] == 20261202
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    # The t test holds its size under normal data: 0.05 within a binomial 99.9% band
    # (formula; scipy.stats.binom).
    lo, hi = stats.binom.interval(0.999, 2000, 0.05)
    assert lo / 2000 <= normal["type_i_error"]["estimate"] <= hi / 2000


TWO_STAGE = {
    "outcome": "binary",
    "layout": "two_stage",
    "find": "sample_size",
    "effect": {"p": 0.4},
    "assumptions": {"p_null": 0.2},
}


@pytest.mark.parametrize(
    ("question", "grid", "field", "words"),
    [
        # Each value a grid lists must be one the question itself may hold: the cell is the
        # question at that value, refused at submission with these words.
        (QUESTION, {"alpha": [0.05, 0.7]}, "grid.alpha.1", "alpha: must be in (0, 0.5]; got 0.7"),
        (QUESTION, {"target_power": [0.8, 1.2]}, "grid.target_power.1", "target_power: must be"),
        (QUESTION, {"assumptions.sd": [1.0, -1.0]}, "grid.assumptions.sd.1", "assumptions.sd"),
        (
            QUESTION,
            {"adjustments.dropout": [0.1, 1.0]},
            "grid.adjustments.dropout.1",
            "adjustments.dropout",
        ),
        # a single-group layout has no allocation ratio: a grid over it would repeat one answer
        (
            TWO_STAGE,
            {"allocation_ratio": [1, 2]},
            "grid.allocation_ratio.1",
            "applies only to two-group layouts",
        ),
    ],
)
def test_a_grid_value_the_question_would_refuse_is_refused(app, api, question, grid, field, words):
    request_id = api.submit(api.request_body(question)).get_json()["id"]
    r = api.post(
        f"/v1/requests/{request_id}/explorations", {"type": "sensitivity_grid", "grid": grid}
    )
    assert r.status_code == 422 and r.mimetype == PROBLEM
    errors = r.get_json()["errors"]
    assert field in errors and words in " ".join(errors[field]), errors
    assert [k for k in errors if k.startswith("grid.")] == [field]  # the valid value passes
    # posted with the request: the same error inside the item, and nothing is stored
    r = api.submit(
        api.request_body(question, explorations=[{"type": "sensitivity_grid", "grid": grid}])
    )
    assert r.status_code == 422
    assert f"explorations.0.{field}" in r.get_json()["errors"]
    with session_scope(api.sessions()) as session:
        assert session.query(Exploration).count() == 0
