"""The design catalogue is generated from the schemas and the engine registry."""

from __future__ import annotations

import json

from service.engine.designs import DESIGN_NAMES, FORMULAS, TESTS
from service.schemas import EFFECT_SCHEMAS, catalogue, load_question


def test_every_design_is_listed_with_formulas_and_tests() -> None:
    cat = catalogue()
    json.dumps(cat, allow_nan=False)  # plain JSON
    assert [d["name"] for d in cat["designs"]] == list(DESIGN_NAMES)
    for d in cat["designs"]:
        assert d["formulas"] == list(FORMULAS[d["name"]])
        assert d["tests"] == list(TESTS[d["name"]])
        assert d["effect"]["forms"]
        names = [f["name"] for f in d["effect"]["fields"]]
        assert names == list(EFFECT_SCHEMAS[d["name"]]._declared_fields)
        assert d["effect"]["solved_for_when_find_is_effect"] in names


def test_ranges_come_from_the_validator() -> None:
    # the catalogue's range for alpha is the one load_question enforces
    alpha = next(f for f in catalogue()["question"] if f["name"] == "alpha")
    assert alpha["exclusiveMinimum"] == 0 and alpha["maximum"] == 0.5
    # no single default: 0.05, or 0.025 one-sided against a margin (ICH E9, 1998)
    assert "default" not in alpha and "0.025" in alpha["description"]
    two_means = next(d for d in catalogue()["designs"] if d["name"] == "two_means")
    sd = next(f for f in two_means["effect"]["fields"] if f["name"] == "sd")
    assert sd["exclusiveMinimum"] == 0 and sd["description"]


def test_listed_families_are_accepted_by_the_schema() -> None:
    cat = catalogue()
    params = {f["name"]: f["parameters"] for f in cat["families"]}
    for d in cat["designs"]:
        model = d["data_model"]
        if model is None or model["shape"] != "two_arm":
            continue
        for family in model["families"]:
            arm = {"family": family}
            for p in params[family]:
                # a value inside the published range for each parameter
                arm[p["name"]] = (
                    2.0
                    if p["name"] == "high"
                    else 0.5
                    if ("maximum" in p or "exclusiveMaximum" in p)
                    else 1.0
                )
            raw = {"design": "rank_sum", "simulation": {"data": {"control": arm, "treatment": arm}}}
            if d["name"] == "rank_sum":
                assert load_question(raw)["simulation"]["data"]["control"]["family"] == family


def test_openapi_document_carries_the_ranges() -> None:
    from apispec import APISpec
    from apispec.ext.marshmallow import MarshmallowPlugin

    from service.schemas import QuestionSchema, register_openapi_types

    plugin = MarshmallowPlugin()
    spec = APISpec(title="sizewise", version="1", openapi_version="3.1.0", plugins=[plugin])
    register_openapi_types(plugin)
    spec.components.schema("Question", schema=QuestionSchema)
    schemas = spec.to_dict()["components"]["schemas"]
    assert schemas["Question"]["properties"]["alpha"]["maximum"] == 0.5
    seed = schemas["Simulation"]["properties"]["seed"]
    assert "integer" in seed["type"] and seed["exclusiveMaximum"] == 2**53
