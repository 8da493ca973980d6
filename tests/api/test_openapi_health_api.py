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


def test_designs_catalogue(client):
    from service.engine import DESIGN_NAMES, TESTS

    r = client.get("/v1/designs")
    assert r.status_code == 200
    body = r.get_json()
    text = r.get_data(as_text=True)
    for name in DESIGN_NAMES:
        assert name in text
        for test in TESTS[name]:
            assert test in text
    assert body


def _calc(client, question: dict):
    return client.post("/v1/calculations", json={"question": question})


def test_calculation_two_means_sample_size(client):
    r = _calc(
        client,
        {"design": "two_means", "find": "sample_size", "effect": {"difference": 0.5, "sd": 1}},
    )
    assert r.status_code == 200
    # Cohen (1988), Table 2.4.1: d = 0.5, two-sided alpha .05, power .80 -> 64 per group.
    assert r.get_json()["sample_size"]["per_arm"] == [64, 64]
    # statsmodels solves the same noncentral t: 63.77 per group (Cohen 1988, Table 2.4.1: 64; recomputed).
    raw = TTestIndPower().solve_power(effect_size=0.5, alpha=0.05, power=0.8)
    assert r.get_json()["sample_size"]["steps"][0]["per_arm_raw"][0] == pytest.approx(raw, abs=0.01)


def test_calculation_correlation_sample_size(client):
    r = _calc(client, {"design": "correlation", "find": "sample_size", "effect": {"r": 0.3}})
    # Cohen (1988), Table 3.4.1: r = 0.3, two-sided alpha .05, power .80 -> 85 (Fisher z).
    sample_size = r.get_json()["sample_size"]
    assert sample_size["total"] == 85
    # formula: n = ((z.975 + z.80) / atanh r)^2 + 3 = 84.93, with scipy's normal quantiles.
    z = stats.norm.ppf
    fisher = ((z(0.975) + z(0.8)) / math.atanh(0.3)) ** 2 + 3
    assert sample_size["steps"][0]["per_arm_raw"][0] == pytest.approx(fisher, abs=0.01)


def test_simulation_is_refused_and_pointed_to_requests(client):
    r = _calc(
        client,
        {
            "design": "two_means",
            "find": "power",
            "sample_size": {"per_arm": [30, 30]},
            "effect": {"difference": 0.5, "sd": 1},
            "method": "simulation",
        },
    )
    assert r.status_code == 422
    body = r.get_json()
    assert "/v1/requests" in body["detail"] and list(body["errors"]) == ["question.method"]
