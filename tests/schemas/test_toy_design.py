"""A design registered from outside (tests/schemas/toy_design.py, no other file edited) appears in
the catalogue, is accepted and checked by the schema, and is part of the JSON Schema and of the
OpenAPI document's Question component."""

from __future__ import annotations

import jsonschema
import pytest

from service.schemas import QuestionInvalid, catalogue, load_question, question_json_schema
from tests.schemas import toy_design


@pytest.fixture
def toy():
    design = toy_design.register()
    yield design
    toy_design.unregister()


def test_the_toy_cell_is_in_the_catalogue(toy) -> None:
    entry = next(c for c in catalogue()["cells"] if c["outcome"] == "count")
    assert entry["layout"] == "two_groups" and entry["label"] == "Count outcome, two groups"
    assert [a["name"] for a in entry["analyses"]] == ["wald_rate"]
    rate = next(f for f in entry["fields"] if f["name"] == "control_rate")
    assert rate["path"] == "assumptions.control_rate" and rate["unit"] == "events per person"


def test_the_schema_accepts_and_checks_the_toy_cell(toy) -> None:
    q = load_question(toy_design.QUESTION)
    assert q["analysis"] == "wald_rate" and q["method"] == "analytic"
    assert q["effect"] == {"rate_ratio": 0.7} and q["assumptions"] == {"control_rate": 1.5}
    assert load_question(q) == q
    with pytest.raises(QuestionInvalid) as info:
        load_question({**toy_design.QUESTION, "assumptions": {"control_rate": -1}})
    assert info.value.errors == {"assumptions.control_rate": ["must be > 0; got -1"]}
    with pytest.raises(QuestionInvalid) as info:
        load_question({**toy_design.QUESTION, "assumptions": {}})
    assert info.value.errors == {"assumptions.control_rate": ["is required: a number > 0"]}
    with pytest.raises(QuestionInvalid) as info:
        load_question({**toy_design.QUESTION, "analysis": "pooled_t"})
    assert "wald_rate" in info.value.errors["analysis"][0]


def test_the_toy_cell_is_gone_once_unregistered() -> None:
    toy_design.register()
    toy_design.unregister()
    with pytest.raises(QuestionInvalid) as info:
        load_question(toy_design.QUESTION)
    assert "outcome" in info.value.errors


def test_the_toy_cell_is_in_the_json_schema(toy) -> None:
    schema = question_json_schema()
    assert "count" in schema["properties"]["outcome"]["enum"]
    check = jsonschema.Draft202012Validator(schema)
    assert list(check.iter_errors(toy_design.QUESTION)) == []
    bad = {**toy_design.QUESTION, "assumptions": {"control_rate": 1.5, "sd": 2.0}}
    assert list(check.iter_errors(bad))


def test_the_toy_cell_is_in_the_openapi_document(toy, app) -> None:
    from service.api.openapi import build_spec

    question = build_spec(app)["components"]["schemas"]["Question"]
    assert "count" in question["properties"]["outcome"]["enum"]
    branch = next(
        b
        for b in question["allOf"]
        if b.get("if", {}).get("properties", {}).get("outcome") == {"const": "count"}
    )
    assert "rate_ratio" in branch["then"]["properties"]["effect"]["properties"]
    assert branch["then"]["properties"]["analysis"]["enum"] == ["wald_rate", None]
