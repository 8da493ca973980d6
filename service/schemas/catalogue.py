"""The catalogue served by ``GET /v1/catalogue``, generated from the designs and the schemas.

Nothing here is a second table: each cell (outcome × layout), its analyses, its fields (type,
range, unit, default, help) and its forms come from the design object the engine registers;
the common question fields, blocks and distribution families from the marshmallow schemas.
"""

from __future__ import annotations

import json
from importlib import resources
from pathlib import Path
from typing import Any

from marshmallow import Schema, fields

from . import declared
from .blocks import (
    AdjustmentsSchema,
    AssuranceSchema,
    ClusterSchema,
    HypothesisSchema,
    InterimSchema,
    SampleSizeSchema,
    SimulationSchema,
)
from .data_models import FAMILIES, FAMILY_SCHEMAS, data_keys, families_for, takes_data
from .fields import Number, Whole
from .json_schema import SCHEMA_PATH
from .request_json_schema import REQUEST_SCHEMA_PATH
from .vocabulary import cells

_RANGE_KEYS = ("minimum", "exclusiveMinimum", "maximum", "exclusiveMaximum", "minItems", "enum")


def field_type(field: fields.Field) -> str:
    """The JSON type name of a schema field."""
    if isinstance(field, Whole):
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
    """One schema field as a catalogue entry: type, help text, range, default, requiredness."""
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
    if isinstance(field, Number):
        entry["allowed"] = field.allowed()
    if isinstance(field, fields.List) and isinstance(field.inner, Number):
        entry["items"] = describe_field("item", field.inner)
    return entry


def describe_schema(schema: type[Schema]) -> list[dict[str, Any]]:
    """All declared fields of a schema class, in declaration order."""
    return [describe_field(name, f) for name, f in schema._declared_fields.items()]


def describe_declared(design: Any, field: Any) -> dict[str, Any]:
    """One declared design field: where it goes, what it is, what it allows, when it is needed."""
    entry: dict[str, Any] = {
        "name": field.name,
        "path": f"{field.block}.{field.name}",
        "block": field.block,
        "type": field.type,
        "label": field.label,
        "help": field.help,
        "unit": field.unit,
        "allowed": declared.allowed(field),
        "needed": needed(design, field),
    }
    for key in ("minimum", "maximum", "min_items", "default"):
        if getattr(field, key) is not None:
            entry[key] = getattr(field, key)
    if field.minimum is not None:
        entry["exclusive_minimum"] = bool(field.exclusive_minimum)
    if field.maximum is not None:
        entry["exclusive_maximum"] = bool(field.exclusive_maximum)
    if field.choices:
        entry["choices"] = list(field.choices)
    return entry


def needed(design: Any, field: Any) -> str:
    """When a field must be posted, in words (the rules ``cell.py`` enforces)."""
    text = _needed_for_tests(design, field)
    estimation = getattr(design, "estimation", None)
    if estimation is None or field.default is not None:
        return text
    if any(field.name in form for form in estimation.forms):
        return f"{text}; required by a precision question (hypothesis.aim estimation)"
    return f"{text}; not used by a precision question (hypothesis.aim estimation)"


def _needed_for_tests(design: Any, field: Any) -> str:
    """When a field must be posted for a sample-size, power or effect question."""
    if field.default is not None:
        return "optional"
    if field.name == design.solved:
        return "required, except for find = effect, which solves for it"
    forms = [form for form in design.forms if field.name in form]
    if forms:
        others = [" + ".join(f) for f in design.forms if field.name not in f]
        return (
            "required in the form "
            + " or ".join(" + ".join(f) for f in forms)
            + (f" (alternative: {', or '.join(others)})" if others else "")
        )
    return "required"


def example(design: Any) -> dict | None:
    """The design's example question: a file of service/examples, or a path of its own."""
    name = getattr(design, "example", "") or ""
    if not name:
        return None
    path = Path(name)
    try:
        if path.is_absolute():
            return json.loads(path.read_text("utf-8"))
        text = resources.files("service.examples").joinpath(name).read_text("utf-8")
        return json.loads(text)
    except (OSError, ValueError):
        return None


def describe_cell(design: Any) -> dict[str, Any]:
    """One cell's catalogue entry (VOCAB §7)."""
    return {
        "outcome": design.outcome,
        "layout": design.layout,
        "name": design.cell,
        "label": design.label,
        "analyses": [
            {
                "name": a.name,
                "label": a.label,
                "methods": list(a.methods),
                "aims": list(a.aims),
                "reference": a.reference,
            }
            for a in design.analyses
        ],
        "fields": [describe_declared(design, f) for f in design.fields],
        "forms": [list(f) for f in design.forms],
        "solved": design.solved,
        "interim": bool(getattr(design, "sequential", False)),
        "estimation": None
        if getattr(design, "estimation", None) is None
        else {
            "forms": [list(f) for f in design.estimation.forms],
            "assurance": design.estimation.assurance,
        },
        "data_model": {"keys": list(data_keys(design)), "families": list(families_for(design))}
        if takes_data(design)
        else None,
        "example": example(design),
    }


def describe_family(family: str) -> dict[str, Any]:
    """One distribution family: its parameters with ranges and help text."""
    params = [e for e in describe_schema(FAMILY_SCHEMAS[family]) if e["name"] != "family"]
    return {"name": family, "parameters": params}


def catalogue() -> dict[str, Any]:
    """Every registered cell, the question's common fields and blocks, the data families."""
    from .question import QuestionSchema

    blocks = {
        "sample_size": SampleSizeSchema,
        "hypothesis": HypothesisSchema,
        "adjustments": AdjustmentsSchema,
        "adjustments.cluster": ClusterSchema,
        "interim": InterimSchema,
        "simulation": SimulationSchema,
        "assurance": AssuranceSchema,
    }
    return {
        "cells": [describe_cell(d) for d in cells()],
        "question": describe_schema(QuestionSchema),
        "blocks": {name: describe_schema(s) for name, s in blocks.items()},
        "families": [describe_family(f) for f in FAMILIES],
        "json_schema": SCHEMA_PATH,
        "request_json_schema": REQUEST_SCHEMA_PATH,
    }
