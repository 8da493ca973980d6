"""GET /v1/catalogue/request.schema.json: the generated JSON Schema of a request body agrees with
the API — every example, wrapped in a request, passes both; each broken body fails both."""

from __future__ import annotations

import copy
import json
from importlib import resources

import jsonschema
import pytest

EXAMPLES = sorted(
    p for p in resources.files("service.examples").iterdir() if p.name.endswith(".json")
)

ENVELOPE = {
    "protocol": {"id": "NGH-CRO-2026-031", "title": "Northbridge schema check", "version": "1.0"},
    "requester": {
        "name": "Dr. Ines Halvorsen",
        "email": "i.halvorsen@northbridge-general.example",
        "department": None,
    },
    "deadline": "2026-12-31",
    "notes": None,
    "effect_source": "SD from the 2024 audit of clinic visits",
}
QUESTION = {
    "outcome": "continuous",
    "layout": "two_groups",
    "find": "sample_size",
    "effect": {"difference": 0.5},
    "assumptions": {"sd": 1.0},
}


def _body(question: dict, **extra) -> dict:
    return {**copy.deepcopy(ENVELOPE), "question": question, **extra}


@pytest.fixture
def validator(client) -> jsonschema.Draft202012Validator:
    r = client.get("/v1/catalogue/request.schema.json")
    assert r.status_code == 200 and r.mimetype == "application/schema+json"
    schema = r.get_json()
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def test_the_question_member_reuses_the_question_schema(client):
    schema = client.get("/v1/catalogue/request.schema.json").get_json()
    question = client.get("/v1/catalogue/question.schema.json").get_json()
    assert schema["properties"]["question"]["$ref"] == "#/$defs/question"
    question.pop("$schema")
    assert schema["$defs"]["question"] == question
    assert schema["required"] == ["protocol", "requester", "question"]
    catalogue = client.get("/v1/catalogue").get_json()
    assert catalogue["request_json_schema"] == "/v1/catalogue/request.schema.json"


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_every_example_in_a_request_validates(validator, path):
    question = json.loads(path.read_text())
    body = _body(question)
    assert list(validator.iter_errors(body)) == []
    grid = {"type": "sensitivity_grid", "grid": {"alpha": [0.025, 0.05]}}
    assert list(validator.iter_errors({**body, "explorations": [grid]})) == []


def test_a_minimal_request_validates_and_is_accepted(validator, client):
    body = {k: v for k, v in _body(QUESTION).items() if k in ("protocol", "requester", "question")}
    assert list(validator.iter_errors(body)) == []
    assert client.post("/v1/requests", json=body).status_code == 202


def _without_protocol_id() -> dict:
    body = _body(QUESTION)
    del body["protocol"]["id"]
    return body


INVALID = {
    "missing protocol.id": (_without_protocol_id(), "protocol.id"),
    "unknown top-level key": (_body(QUESTION, priority="high"), "priority"),
    "deadline a number": (_body(QUESTION, deadline=20261231), "deadline"),
    "deadline not a date": (_body(QUESTION, deadline="next week"), "deadline"),
    "question of an unknown outcome": (_body({**QUESTION, "outcome": "ordinal"}), "question"),
    "question with a string sd": (
        _body({**QUESTION, "assumptions": {"sd": "one"}}),
        "question.assumptions.sd",
    ),
    "question with an unknown key": (_body({**QUESTION, "colour": "red"}), "question"),
    "too many explorations": (
        _body(QUESTION, explorations=[{"type": "robustness_panel"}] * 11),
        "explorations",
    ),
}


@pytest.mark.parametrize("case", INVALID, ids=str)
def test_a_broken_body_is_refused_by_the_schema_and_the_api(validator, client, case):
    body, field = INVALID[case]
    assert list(validator.iter_errors(body)), case
    r = client.post("/v1/requests", json=body)
    assert r.status_code == 422, r.get_json()
    names = json.dumps(r.get_json())
    assert field in names, names


def test_the_openapi_document_lists_the_route(client):
    spec = client.get("/openapi.json").get_json()
    get = spec["paths"]["/v1/catalogue/request.schema.json"]["get"]
    assert "application/schema+json" in get["responses"]["200"]["content"]
