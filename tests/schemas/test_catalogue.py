"""The catalogue and the question's JSON Schema are generated from the designs' declarations."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import jsonschema
import pytest

from service.engine import designs
from service.schemas import QuestionInvalid, catalogue, load_question, question_json_schema

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"


def test_every_cell_is_listed_with_its_analyses_fields_and_example() -> None:
    cat = catalogue()
    json.dumps(cat, allow_nan=False)  # plain JSON
    cells = [(c["outcome"], c["layout"]) for c in cat["cells"]]
    assert cells == [(d.outcome, d.layout) for d in designs.all()]
    for entry, design in zip(cat["cells"], designs.all(), strict=True):
        assert entry["label"] == design.label
        assert [a["name"] for a in entry["analyses"]] == [a.name for a in design.analyses]
        assert all(a["methods"] and a["aims"] and a["label"] for a in entry["analyses"])
        assert [f["name"] for f in entry["fields"]] == [f.name for f in design.fields]
        assert all(f["help"] and f["label"] and f["allowed"] for f in entry["fields"])
        assert entry["example"] is not None, design.cell
        assert (entry["example"]["outcome"], entry["example"]["layout"]) == cells[
            cat["cells"].index(entry)
        ]
        load_question(entry["example"])  # the listed example is a valid question


def test_ranges_come_from_the_validator() -> None:
    # the catalogue's range for alpha is the one load_question enforces
    alpha = next(f for f in catalogue()["question"] if f["name"] == "alpha")
    assert alpha["exclusiveMinimum"] == 0 and alpha["maximum"] == 0.5
    # no single default: 0.05, or 0.025 one-sided against a margin (ICH E9, 1998)
    assert "default" not in alpha and "0.025" in alpha["description"]
    two = next(
        c
        for c in catalogue()["cells"]
        if (c["outcome"], c["layout"]) == ("continuous", "two_groups")
    )
    sd = next(f for f in two["fields"] if f["name"] == "sd")
    assert sd["path"] == "assumptions.sd" and sd["minimum"] == 0 and sd["exclusive_minimum"]
    assert sd["allowed"] == "a number > 0" and "sd_control + sd_treatment" in sd["needed"]
    with pytest.raises(QuestionInvalid) as info:
        load_question({**two["example"], "assumptions": {"sd": 0}})
    assert info.value.errors["assumptions.sd"] == ["must be > 0; got 0"]


def test_listed_families_are_accepted_by_the_schema() -> None:
    cat = catalogue()
    params = {f["name"]: f["parameters"] for f in cat["families"]}
    ranks = next(c for c in cat["cells"] if c["outcome"] == "ordinal")
    for family in ranks["data_model"]["families"]:
        dist = {"family": family}
        for p in params[family]:
            # a value inside the published range for each parameter
            dist[p["name"]] = (
                2.0
                if p["name"] == "high"
                else 0.5
                if ("maximum" in p or "exclusiveMaximum" in p)
                else 1.0
            )
        raw = {
            "outcome": "ordinal",
            "layout": "two_groups",
            "simulation": {"data": {"control": dist, "treatment": dist}},
        }
        assert load_question(raw)["simulation"]["data"]["control"]["family"] == family


# ----- the JSON Schema (draft 2020-12) -------------------------------------------------------


def validator() -> jsonschema.Draft202012Validator:
    schema = question_json_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


@pytest.mark.parametrize("path", sorted(EXAMPLES.glob("*.json")), ids=lambda p: p.stem)
def test_every_example_and_its_normalized_form_satisfy_the_json_schema(path: Path) -> None:
    raw = json.loads(path.read_text())
    check = validator()
    assert list(check.iter_errors(raw)) == []
    assert list(check.iter_errors(load_question(raw))) == []


BP = json.loads((EXAMPLES / "northbridge_bp_trial.json").read_text())


def _with(**changes) -> dict:
    out = copy.deepcopy(BP)
    out.update(changes)
    return out


# Bodies both the JSON Schema and the validator refuse, and the field the validator names.
REFUSED = [
    ("alpha", _with(alpha=0.7)),
    ("assumptions.sd", _with(assumptions={"sd": -1})),
    ("assumptions.sigma", _with(assumptions={"sd": 12.0, "sigma": 3})),
    ("analysis", _with(analysis="logrank")),
    ("alternative", _with(alternative="greater")),
    ("layout", _with(layout="k_groups_of_pairs")),
    ("outcome", _with(outcome="waveform")),
    (
        "simulation.data.control.family",
        _with(
            method="simulation",
            simulation={
                "data": {
                    "control": {"family": "bernoulli", "p": 0.5},
                    "treatment": {"family": "normal", "mean": 0, "sd": 1},
                }
            },
        ),
    ),
]


@pytest.mark.parametrize("field, raw", REFUSED, ids=[f for f, _ in REFUSED])
def test_invalid_bodies_are_refused_by_both(field: str, raw: dict) -> None:
    assert list(validator().iter_errors(raw)), "the JSON Schema accepted it"
    with pytest.raises(QuestionInvalid) as info:
        load_question(raw)
    assert field in info.value.errors


def test_each_cell_branch_lists_its_analyses_and_fields() -> None:
    schema = question_json_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    branches = [b for b in schema["allOf"] if "if" in b]
    assert len(branches) == len(designs.all())
    for branch, design in zip(branches, designs.all(), strict=True):
        props = branch["then"]["properties"]
        assert props["analysis"]["enum"] == [*(a.name for a in design.analyses), None]
        for f in design.fields:
            declared = props[f.block]["properties"][f.name]
            assert declared["title"] == f.label
    assert schema["properties"]["outcome"]["enum"] == sorted(
        {d.outcome for d in designs.all()}, key=[d.outcome for d in designs.all()].index
    )
