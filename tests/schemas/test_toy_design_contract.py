"""A design registered from outside (no other file edited) appears in the catalogue, is accepted
and checked by the schema, and is part of the JSON Schema and of the OpenAPI document's Question
component. Two toys: the two-group one of tests/schemas (also rendered by the report tests) and
the engine tests' single-group one."""

from __future__ import annotations

import jsonschema
import pytest

from service.schemas import QuestionInvalid, catalogue, load_question, question_json_schema
from tests.engine import toy_design as engine_toy
from tests.schemas import toy_design as schema_toy

TOYS = [
    (schema_toy, schema_toy.QUESTION),
    (
        engine_toy,
        {
            "outcome": "toy_count",
            "layout": "single_group",
            "effect": {"rate_ratio": 1.5},
            "assumptions": {"reference_rate": 2.0},
        },
    ),
]


@pytest.fixture(params=TOYS, ids=["two_groups", "single_group"])
def toy(request):
    module, question = request.param
    design = module.register()
    yield design, question
    module.unregister()


def _branch(schema: dict, design) -> dict:
    return next(
        b
        for b in schema["allOf"]
        if b.get("if", {}).get("properties", {}).get("layout") == {"const": design.layout}
        and b["if"]["properties"]["outcome"] == {"const": design.outcome}
    )


def test_the_toy_cell_is_in_the_catalogue(toy) -> None:
    design, _ = toy
    entry = next(
        c
        for c in catalogue()["cells"]
        if (c["outcome"], c["layout"]) == ("toy_count", design.layout)
    )
    assert entry["label"] == design.label
    assert [a["name"] for a in entry["analyses"]] == [a.name for a in design.analyses]
    rate = entry["fields"][1]
    assert rate["path"] == f"assumptions.{design.fields[1].name}"
    assert rate["unit"] == "events per person" and rate["allowed"] == "a number > 0"


def test_the_schema_accepts_and_checks_the_toy_cell(toy) -> None:
    design, question = toy
    q = load_question(question)
    assert q["analysis"] == design.analyses[0].name and q["method"] == "analytic"
    assert q["effect"] == question["effect"] and q["assumptions"] == question["assumptions"]
    assert load_question(q) == q
    rate = design.fields[1].name
    with pytest.raises(QuestionInvalid) as info:
        load_question({**question, "assumptions": {rate: -1}})
    assert info.value.errors == {f"assumptions.{rate}": ["must be > 0; got -1"]}
    with pytest.raises(QuestionInvalid) as info:
        load_question({**question, "assumptions": {}})
    assert info.value.errors == {f"assumptions.{rate}": ["is required: a number > 0"]}
    with pytest.raises(QuestionInvalid) as info:
        load_question({**question, "analysis": "pooled_t"})
    assert design.analyses[0].name in info.value.errors["analysis"][0]


def test_the_toy_cell_is_gone_once_unregistered() -> None:
    schema_toy.register()
    schema_toy.unregister()
    with pytest.raises(QuestionInvalid) as info:
        load_question(schema_toy.QUESTION)
    assert "outcome" in info.value.errors


def test_the_toy_cell_is_in_the_json_schema(toy) -> None:
    design, question = toy
    schema = question_json_schema()
    assert "toy_count" in schema["properties"]["outcome"]["enum"]
    check = jsonschema.Draft202012Validator(schema)
    assert list(check.iter_errors(question)) == []
    assert list(check.iter_errors({**question, "assumptions": {"sd": 2.0}}))
    assert _branch(schema, design)["description"] == design.label


def test_the_toy_cell_is_in_the_openapi_document(toy, app) -> None:
    from service.api.openapi import build_spec

    design, _ = toy
    schemas = build_spec(app)["components"]["schemas"]
    # The toy cell is one more variant of the Question component, named after its cell.
    cell = "".join(w.title() for part in (design.outcome, design.layout) for w in part.split("_"))
    assert {"$ref": f"#/components/schemas/Question{cell}"} in schemas["Question"]["oneOf"]
    variant = schemas[f"Question{cell}"]["properties"]
    assert variant["outcome"]["const"] == design.outcome
    assert "rate_ratio" in schemas[f"{cell}Effect"]["properties"]
    # The cell's analyses as a named enum, or null for the cell's default.
    analysis, null = variant["analysis"]["anyOf"]
    assert null == {"type": "null"}
    assert schemas[analysis["$ref"].rsplit("/", 1)[-1]]["enum"] == [design.analyses[0].name]
