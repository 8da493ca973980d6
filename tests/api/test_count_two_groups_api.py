"""Event counts in two groups (count × two_groups) through the API, the CLI, the worker's job,
the catalogue and the report. The references are the engine's own record for the same question
(its digits are checked against Zhu & Lakkis 2014 and statsmodels in
tests/engine/test_count_two_groups.py). Demo data: Northbridge General Hospital, invented."""

from __future__ import annotations

import html
import json
import math
import subprocess
import sys
from pathlib import Path

import pytest
from scipy import stats

from service import create_app
from service.engine import canonical_json, compute, designs
from service.reports.justification import justification
from service.reports.plots import curve_points, power_curve_svg
from service.reports.render import render_report
from service.schemas import load_question
from tests.reports.reports_testkit import REQUEST
from workers.tasks import run_request_job

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "service" / "examples"
DESIGN = designs.get("count", "two_groups")


def _example() -> dict:
    return json.loads((EXAMPLES / DESIGN.example).read_text(encoding="utf-8"))


@pytest.fixture
def live_app(settings):
    """The application with closed-form answers at submission (the default behavior)."""
    application = create_app(dict(settings, ANSWER_AT_SUBMISSION=True))
    yield application
    application.extensions["sizewise"]["engine"].dispose()


@pytest.fixture
def live_api(live_app, api, tokens):
    return type(api)(live_app.test_client(), live_app, type(tokens)(live_app))


def test_example_through_api_cli_and_report(client):
    question = _example()
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 200, r.get_json()
    api = r.get_json()
    record = compute(load_question(question))
    assert api["sample_size"] == record["sample_size"]
    # formula (Zhu & Lakkis 2014, V0 = V1): (z.975 + z.90)²·(1/0.8 + 0.6 + 1/0.56 + 0.6)/ln²0.7
    # = 349.8 analyzed per group → 350, then 10% dropout: ⌈350 / 0.9⌉ = 389 enrolled.
    w = 1 / 0.8 + 0.6 + 1 / 0.56 + 0.6
    raw = (stats.norm.ppf(0.975) + stats.norm.ppf(0.9)) ** 2 * w / math.log(0.7) ** 2
    assert api["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(raw, abs=0.01)
    assert api["sample_size"]["per_group"] == [math.ceil(math.ceil(raw) / 0.9)] * 2 == [389, 389]

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(EXAMPLES / DESIGN.example)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["sample_size"] == record["sample_size"]

    text = justification(record)
    assert DESIGN.label in text
    assert "a rate ratio of 0.7 (treatment over control)" in text
    assert "a control rate of 0.8 events per subject per year" in text
    assert "a negative binomial overdispersion of 0.6" in text
    assert record["method"]["analysis_label"] in text
    page = render_report(REQUEST, record, curve_svg=power_curve_svg(curve_points(record, points=5)))
    assert html.escape(record["method"]["analysis_label"], quote=False) in page


def test_noninferiority_report_states_the_limit_on_the_rate_ratio():
    question = _example()
    question.update(
        effect={"rate_ratio": 1.0},
        alternative="one-sided",
        hypothesis={"aim": "noninferiority", "margin": 0.22314355131420976},
    )
    question["hypothesis"]["higher_is_better"] = False
    record = compute(load_question(question))
    text = justification(record)
    assert "non-inferiority with a limit of 1.25 on the rate ratio" in text


def test_analytic_request_is_answered_at_submission(live_api):
    body = live_api.submit(live_api.request_body(_example())).get_json()
    assert body["status"] == "computed", body
    assert canonical_json(body["result"]) == canonical_json(compute(body["question"]))
    assert body["result"]["sample_size"]["per_group"] == [389, 389]  # as above


def test_simulated_request_is_computed_by_the_worker_job(api, app):
    question = dict(
        _example(),
        find="power",
        sample_size={"per_group": [150, 150]},
        method="simulation",
        simulation={"replicates": 1000, "seed": 14},
    )
    question.pop("target_power")
    queued = api.submit(api.request_body(question)).get_json()
    assert queued["status"] == "queued", queued
    config = app.extensions["sizewise"]["config"]
    assert run_request_job(queued["id"], config) == "computed"
    stored = api.client.get(f"/v1/requests/{queued['id']}").get_json()["result"]
    assert canonical_json(stored) == canonical_json(compute(queued["question"]))
    assert stored["method"]["data"]["counts"] == "negative binomial (gamma-Poisson)"
    assert (
        abs(stored["power"]["estimate"] - stored["power"]["analytic"])
        <= 4 * stored["power"]["mcse"]
    )


def test_catalogue_lists_the_cell_with_its_fields(client):
    cells = client.get("/v1/catalogue").get_json()["cells"]
    (cell,) = [c for c in cells if (c["outcome"], c["layout"]) == ("count", "two_groups")]
    text = json.dumps(cell)
    for name in ("rate_ratio", "control_rate", "follow_up", "overdispersion", "time_unit"):
        assert name in text
    for analysis in ("negative_binomial_wald", "poisson_wald"):
        assert analysis in text


def test_missing_time_unit_is_refused_naming_the_field(client):
    question = _example()
    del question["assumptions"]["time_unit"]
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422
    assert "question.assumptions.time_unit" in r.get_json()["errors"]


def test_poisson_test_on_overdispersed_counts_is_refused_naming_the_analysis(client):
    question = dict(_example(), analysis="poisson_wald")
    r = client.post("/v1/calculations", json={"question": question})
    assert r.status_code == 422, r.get_json()
    errors = r.get_json()["errors"]
    assert "question.analysis" in errors
    assert "negative_binomial_wald" in " ".join(errors["question.analysis"])
