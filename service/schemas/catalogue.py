"""The design catalogue served by ``GET /v1/designs``, generated from the question schemas.

Nothing here is a second table: field names, types, ranges, defaults and help text come from the
marshmallow fields' metadata in ``effects.py`` and ``question.py``; formulas and tests from the engine registry.
"""

from __future__ import annotations

from typing import Any

from marshmallow import Schema, fields

from service.engine.designs import DESIGN_NAMES, FORMULAS, TESTS

from . import question as q

_RANGE_KEYS = ("minimum", "exclusiveMinimum", "maximum", "exclusiveMaximum", "minItems", "enum")


def field_type(field: fields.Field) -> str:
    """The JSON type name of a schema field."""
    if isinstance(field, q.Whole):
        return "integer"
    if isinstance(field, fields.Float):
        return "number"
    if isinstance(field, fields.Boolean):
        return "boolean"
    if isinstance(field, fields.List):
        return "array"
    if isinstance(field, fields.String):
        return "string"
    return "object"


def describe_field(name: str, field: fields.Field) -> dict[str, Any]:
    """One field as a catalogue entry: type, help text, range, default, and whether required."""
    meta = field.metadata
    entry: dict[str, Any] = {
        "name": name,
        "type": field_type(field),
        "description": meta.get("description", ""),
        "required": bool(field.required),
    }
    for key in _RANGE_KEYS:
        if key in meta:
            entry[key] = meta[key]
    if "default" in meta:
        entry["default"] = meta["default"]
    if isinstance(field, q.Number):
        entry["allowed"] = field.allowed()
    if isinstance(field, fields.List) and isinstance(field.inner, q.Number):
        entry["items"] = describe_field("item", field.inner)
    return entry


def describe_schema(schema: type[Schema]) -> list[dict[str, Any]]:
    """All declared fields of a schema class, in declaration order."""
    return [describe_field(name, f) for name, f in schema._declared_fields.items()]


def _first_line(doc: str | None) -> str:
    return (doc or "").strip().splitlines()[0] if doc else ""


def describe_design(design: str) -> dict[str, Any]:
    """One design's catalogue entry."""
    effect = q.EFFECT_SCHEMAS[design]
    shape = q.DATA_SHAPES[design]
    data_schema = q.DATA_SCHEMAS[design]
    return {
        "name": design,
        "description": _first_line(effect.__doc__),
        "two_arm": design in q.TWO_ARM,
        "effect": {
            "fields": describe_schema(effect),
            "forms": list(effect.FORMS),
            "solved_for_when_find_is_effect": effect.SOLVED,
        },
        "hypotheses": list(q.KINDS) if design in q.MARGIN_DESIGNS else ["superiority"],
        "formulas": list(FORMULAS[design]),
        "default_formula": FORMULAS[design][0],
        "tests": list(TESTS[design]),
        "default_test": TESTS[design][0],
        "data_model": None
        if data_schema is None
        else {
            "shape": shape,
            "keys": list(data_schema._declared_fields),
            "families": list(q.families_for(design)),
        },
    }


def describe_family(family: str) -> dict[str, Any]:
    """One distribution family: its parameters with ranges and help text."""
    fields_ = [e for e in describe_schema(q.ARM_SCHEMAS[family]) if e["name"] != "family"]
    return {"name": family, "parameters": fields_}


def catalogue() -> dict[str, Any]:
    """The full catalogue: the question's top-level fields, every design and every family."""
    blocks = {
        "sample_size": q.SampleSizeSchema,
        "hypothesis": q.HypothesisSchema,
        "adjustments": q.AdjustmentsSchema,
        "adjustments.cluster": q.ClusterSchema,
        "simulation": q.SimulationSchema,
    }
    return {
        "question": describe_schema(q.QuestionSchema),
        "blocks": {name: describe_schema(s) for name, s in blocks.items()},
        "designs": [describe_design(d) for d in DESIGN_NAMES],
        "families": [describe_family(f) for f in q.FAMILIES],
    }
