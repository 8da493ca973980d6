"""Precision questions (hypothesis.aim = estimation) through the API, a worker, the CLI and the
report; the schema's refusals name the field. Demo data: Northbridge General Hospital, invented.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
from scipy import stats

from service import create_app
from service.engine import canonical_json, compute
from service.schemas import load_question
from workers.tasks import run_request_job

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "service" / "examples" / "northbridge_vitamin_d_precision.json"


def _example() -> dict:
    return json.loads(EXAMPLE.read_text())


def _cli() -> list[str]:
    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    return [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]


def test_calculation_answers_the_example(client):
    r = client.post("/v1/calculations", json={"question": _example()})
    assert r.status_code == 200, r.get_json()
    record = r.get_json()
    assert record["power"] is None
    assert record["question"]["hypothesis"]["aim"] == "estimation"
    n = record["sample_size"]["steps"][0]["per_group"][0]
    # formula (Kupper & Hafner 1989, Am Stat 43:101): P(χ²(n−1) ≤ (n−1)·n·E²/(t·σ)²) ≥ 0.9 at
    # the base n and not at n − 1; t from scipy.stats.t, the chi-square from scipy.stats.chi2.

    def prob(m: int) -> float:
        t = stats.t.ppf(0.975, m - 1)
        return stats.chi2.cdf((m - 1) * m * 3.0**2 / (t * 20.0) ** 2, m - 1)

    assert prob(n) >= 0.9 > prob(n - 1)
    # dropout 10% applies as usual
    assert record["sample_size"]["per_group"] == [math.ceil(n / 0.9 - 1e-9)]
    block = record["precision"]
    assert block["half_width_target"] == 3.0 and block["assurance"] == 0.9
    assert block["confidence"] == 0.95 and block["half_width_assured"] <= 3.0
    assert block["interval"] == record["method"]["analysis_label"]


def test_request_is_answered_at_submission_and_by_a_worker(settings, api, app):
    live = create_app(dict(settings, ANSWER_AT_SUBMISSION=True))
    try:
        live_api = type(api)(live.test_client(), live, type(api.tokens)(live))
        body = live_api.submit(live_api.request_body(_example())).get_json()
        assert body["status"] == "computed", body
        assert canonical_json(body["result"]) == canonical_json(compute(body["question"]))
    finally:
        live.extensions["sizewise"]["engine"].dispose()
    queued = api.submit(api.request_body(_example())).get_json()
    assert queued["status"] == "queued"
    assert run_request_job(queued["id"], app.extensions["sizewise"]["config"]) == "computed"
    worker = api.client.get(f"/v1/requests/{queued['id']}").get_json()
    assert canonical_json(worker["result"]) == canonical_json(body["result"])
    page = api.client.get(f"/v1/requests/{queued['id']}/report")
    assert page.status_code == 200
    text = page.get_data(as_text=True)
    assert "Precision curve" in text and "half-width is at most 3" in text
    assert "with a probability of at least 90%" in text


def test_cli_answers_the_example():
    out = subprocess.run(
        [*_cli(), "compute", str(EXAMPLE)], capture_output=True, text=True, cwd=ROOT, timeout=120
    )
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["precision"] == compute(load_question(_example()))["precision"]


def test_catalogue_and_json_schema_show_the_aim(client):
    catalogue = client.get("/v1/catalogue").get_json()
    cells = {(c["outcome"], c["layout"]): c for c in catalogue["cells"]}
    for cell, analysis in [
        (("continuous", "single_group"), "t_interval"),
        (("continuous", "two_groups"), "pooled_t_interval"),
        (("binary", "two_groups"), "newcombe_interval"),
    ]:
        offered = {a["name"]: a["aims"] for a in cells[cell]["analyses"]}
        assert offered[analysis] == ["estimation"]
        assert cells[cell]["estimation"]["forms"]
    hypothesis = {f["name"]: f for f in catalogue["blocks"]["hypothesis"]}
    assert {"half_width", "confidence", "assurance"} <= set(hypothesis)
    schema = client.get("/v1/catalogue/question.schema.json").get_json()
    text = json.dumps(schema)
    assert '"estimation"' in text and "half_width" in text and '"precision"' in text


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"alpha": 0.05}, "question.alpha"),
        ({"target_power": 0.8}, "question.target_power"),
        ({"alternative": "one-sided"}, "question.alternative"),
        ({"find": "power", "sample_size": {"per_group": [50]}}, "question.find"),
        ({"method": "simulation"}, "question.method"),
        ({"effect": {"difference": 2.0}}, "question.effect.difference"),
        ({"hypothesis": {"aim": "estimation", "half_width": 3.0, "margin": 1.0}}, "margin"),
        ({"hypothesis": {"aim": "estimation"}}, "question.hypothesis.half_width"),
        ({"hypothesis": {"aim": "estimation", "half_width": -1.0}}, "half_width"),
        ({"hypothesis": {"aim": "estimation", "half_width": 3, "confidence": 1.2}}, "confidence"),
        ({"adjustments": {"comparisons": 2}}, "question.adjustments.comparisons"),
        (
            {
                "find": "precision",
                "hypothesis": {"aim": "estimation"},
                "sample_size": {"per_group": [2]},
                "adjustments": {"dropout": 0.99},
            },
            "sample_size",
        ),
        ({"find": "precision", "sample_size": {"per_group": [50]}}, "half_width"),
    ],
)
def test_refusals_name_the_field(client, change, field):
    question = {**_example(), **change}
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422, r.get_json()
    errors = r.get_json()["errors"]
    assert any(field in path for path in errors), errors


def test_estimation_words_are_refused_for_a_test(client):
    question = {
        "outcome": "continuous",
        "layout": "single_group",
        "effect": {"difference": 2.0},
        "assumptions": {"sd": 10.0},
        "hypothesis": {"aim": "superiority", "half_width": 3.0},
    }
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "question.hypothesis.half_width" in r.get_json()["errors"]


def test_a_cell_without_intervals_refuses_the_aim(client):
    question = {
        "outcome": "association",
        "layout": "single_group",
        "effect": {"r": 0.3},
        "hypothesis": {"aim": "estimation", "half_width": 0.1},
    }
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "question.hypothesis.aim" in r.get_json()["errors"]
