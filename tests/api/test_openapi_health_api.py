"""OpenAPI document, health probes, the catalogue and synchronous calculations."""

from __future__ import annotations

import math
import re

import pytest
from scipy import stats
from statsmodels.stats.power import TTestIndPower

from service import create_app


def test_openapi_is_valid_and_lists_every_route(app, client):
    from openapi_spec_validator import validate

    spec = client.get("/openapi.json").get_json()
    validate(spec)
    assert spec["openapi"].startswith("3.1")
    expected = set()
    for rule in app.url_map.iter_rules():
        # The desk's pages are for browsers (tests/desk), not part of the API.
        if rule.endpoint == "static" or rule.endpoint.startswith("desk."):
            continue
        path = re.sub(r"<(?:[^:<>]+:)?([^<>]+)>", r"{\1}", rule.rule)
        expected |= {(path, m.lower()) for m in rule.methods - {"HEAD", "OPTIONS"}}
    documented = {(p, m) for p, ops in spec["paths"].items() for m in ops if m != "parameters"}
    assert documented == expected
    create = spec["paths"]["/v1/requests"]["post"]
    assert set(create["responses"]) >= {"202", "200", "415", "422"}
    assert "RequestCreate" in spec["components"]["schemas"]
    problem = create["responses"]["422"]["content"]["application/problem+json"]["schema"]
    assert problem == {"$ref": "#/components/schemas/Problem"}


def test_healthz(client):
    assert client.get("/healthz").get_json() == {"status": "ok"}


def test_readyz_ok(client):
    r = client.get("/readyz")
    assert r.status_code == 200
    assert r.get_json()["checks"] == {"database": "ok", "broker": "ok"}


def test_readyz_503_when_the_database_port_is_closed(tmp_path):
    app = create_app(
        {
            "DATABASE_URL": "postgresql+psycopg://postgres@127.0.0.1:1/sizewise",
            "BROKER_URL": f"filesystem://{tmp_path}",
        }
    )
    r = app.test_client().get("/readyz")
    assert r.status_code == 503 and r.mimetype == "application/problem+json"
    checks = r.get_json()["checks"]
    assert checks["database"].startswith("unreachable") and checks["broker"] == "ok"


def test_readyz_503_when_redis_is_unreachable(settings):
    app = create_app(dict(settings, BROKER_URL="redis://127.0.0.1:1/0"))
    r = app.test_client().get("/readyz")
    assert r.status_code == 503
    assert r.get_json()["checks"]["broker"].startswith("unreachable")


def test_catalogue_lists_every_cell_with_its_analyses(client):
    from service.engine import designs

    r = client.get("/v1/catalogue")
    assert r.status_code == 200
    cells = r.get_json()["cells"]
    assert [(c["outcome"], c["layout"]) for c in cells] == [
        (d.outcome, d.layout) for d in designs.all()
    ]
    for cell, design in zip(cells, designs.all(), strict=True):
        assert [a["name"] for a in cell["analyses"]] == [a.name for a in design.analyses]
        assert cell["label"] == design.label and cell["fields"]


def test_question_json_schema_is_served_and_validates_the_catalogue_examples(client):
    import jsonschema

    r = client.get("/v1/catalogue/question.schema.json")
    assert r.status_code == 200 and r.mimetype == "application/schema+json"
    schema = r.get_json()
    jsonschema.Draft202012Validator.check_schema(schema)
    check = jsonschema.Draft202012Validator(schema)
    for cell in client.get("/v1/catalogue").get_json()["cells"]:
        assert list(check.iter_errors(cell["example"])) == [], cell["name"]


def test_openapi_question_component_is_the_generated_schema(client):
    spec = client.get("/openapi.json").get_json()
    schemas = spec["components"]["schemas"]
    # One variant per cell, its outcome and layout constants (service.schemas.json_schema).
    variants = [v["$ref"].rsplit("/", 1)[-1] for v in schemas["Question"]["oneOf"]]
    two = schemas["QuestionContinuousTwoGroups"]["properties"]
    assert "QuestionContinuousTwoGroups" in variants
    assert (two["outcome"]["const"], two["layout"]["const"]) == ("continuous", "two_groups")
    analysis = two["analysis"]["anyOf"][0]["$ref"].rsplit("/", 1)[-1]
    assert "welch_t" in schemas[analysis]["enum"]
    for body in ("RequestCreate", "CalculationCreate"):
        member = spec["components"]["schemas"][body]["properties"]["question"]
        assert member["$ref"] == "#/components/schemas/Question"


TWO = {"outcome": "continuous", "layout": "two_groups"}


def _calc(client, question: dict):
    return client.post("/v1/calculations", json={"question": question})


def test_calculation_two_groups_sample_size(client):
    r = _calc(
        client,
        {**TWO, "find": "sample_size", "effect": {"difference": 0.5}, "assumptions": {"sd": 1}},
    )
    assert r.status_code == 200
    # Cohen (1988), Table 2.4.1: d = 0.5, two-sided alpha .05, power .80 -> 64 per group.
    assert r.get_json()["sample_size"]["per_group"] == [64, 64]
    # statsmodels solves the same noncentral t: 63.77 per group (Cohen 1988, Table 2.4.1: 64; recomputed).
    raw = TTestIndPower().solve_power(effect_size=0.5, alpha=0.05, power=0.8)
    step = r.get_json()["sample_size"]["steps"][0]
    assert step["per_group_raw"][0] == pytest.approx(raw, abs=0.01)


def test_calculation_correlation_sample_size(client):
    r = _calc(
        client,
        {"outcome": "association", "layout": "single_group", "effect": {"r": 0.3}},
    )
    # Cohen (1988), Table 3.4.1: r = 0.3, two-sided alpha .05, power .80 -> 85 (Fisher z).
    sample_size = r.get_json()["sample_size"]
    assert sample_size["total"] == 85
    # formula: n = ((z.975 + z.80) / atanh r)^2 + 3 = 84.93, with scipy's normal quantiles.
    z = stats.norm.ppf
    fisher = ((z(0.975) + z(0.8)) / math.atanh(0.3)) ** 2 + 3
    assert sample_size["steps"][0]["per_group_raw"][0] == pytest.approx(fisher, abs=0.01)


def test_calculation_takes_the_same_document_as_compute_and_a_request(client, api):
    import json
    from pathlib import Path

    path = (
        Path(__file__).resolve().parents[2] / "service" / "examples" / "northbridge_bp_trial.json"
    )
    question = json.loads(path.read_text())
    calculated = _calc(client, question).get_json()
    submitted = api.post("/v1/requests", api.request_body(question)).get_json()
    assert submitted["question"] == calculated["question"]


@pytest.mark.parametrize(
    "changes, field",
    [
        # power 0.8 is out of reach below 1e9 per group: the engine refuses the effect
        ({"effect": {"difference": 1e-7}}, "question.effect.difference"),
        # the noncentral t overflows: the engine fails on the field of extreme magnitude
        ({"assumptions": {"sd": 1e-150}}, "question.assumptions.sd"),
    ],
)
def test_a_question_the_engine_refuses_is_a_422_naming_the_field(client, changes, field):
    question = {**TWO, "effect": {"difference": 1.0}, "assumptions": {"sd": 1.0}, **changes}
    r = _calc(client, question)
    body = r.get_json()
    assert r.status_code == 422, body
    assert body["title"] != "Cannot answer" and list(body["errors"]) == [field]


def test_simulation_is_refused_and_pointed_to_requests(client):
    r = _calc(
        client,
        {
            **TWO,
            "find": "power",
            "sample_size": {"per_group": [30, 30]},
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1},
            "method": "simulation",
        },
    )
    assert r.status_code == 422
    body = r.get_json()
    assert "/v1/requests" in body["detail"] and list(body["errors"]) == ["question.method"]
