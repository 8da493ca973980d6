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

from marshmallow import Schema, fields, validate

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
from .vocabulary import AIMS, BLOCKS, METHODS, cells

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


# ---------------------------------------------------------------------------------------------
# The catalogue's shape, for the OpenAPI document (the generator above is what is served).

JSON_TYPES = ("integer", "number", "boolean", "array", "string", "object")
DECLARED_TYPES = ("number", "integer", "boolean", "choice", "number_list")
_VALUE = "a number, a whole number, true or false, or one of the choices, as the type says"


class CommonFieldSchema(Schema):
    """One field of the question's common part or of a block (``describe_field``)."""

    name = fields.String(required=True)
    type = fields.String(
        required=True,
        validate=validate.OneOf(JSON_TYPES),
    )
    description = fields.String(required=True)
    required = fields.Boolean(required=True)
    allowed = fields.String(metadata={"description": "What a number field accepts, in words."})
    minimum = fields.Float()
    exclusiveMinimum = fields.Float()
    maximum = fields.Float()
    exclusiveMaximum = fields.Float()
    minItems = fields.Integer()
    enum = fields.List(fields.Raw(), metadata={"description": "The allowed values."})
    default = fields.Raw(allow_none=True)
    items = fields.Dict(metadata={"description": "A list's item, described like a field."})


class DeclaredFieldSchema(Schema):
    """One declared field of a cell: where it goes, what it is and allows, when it is needed."""

    name = fields.String(required=True)
    path = fields.String(required=True, metadata={"description": "block.name"})
    block = fields.String(required=True, validate=validate.OneOf(BLOCKS))
    type = fields.String(
        required=True,
        validate=validate.OneOf(DECLARED_TYPES),
    )
    label = fields.String(required=True)
    help = fields.String(required=True)
    unit = fields.String(required=True, allow_none=True)
    allowed = fields.String(required=True, metadata={"description": "What it accepts, in words."})
    needed = fields.String(required=True, metadata={"description": "When it must be posted."})
    minimum = fields.Float()
    maximum = fields.Float()
    exclusive_minimum = fields.Boolean()
    exclusive_maximum = fields.Boolean()
    min_items = fields.Integer()
    default = fields.Raw(metadata={"description": _VALUE})
    choices = fields.List(fields.String())


class AnalysisEntrySchema(Schema):
    """One analysis a cell offers."""

    name = fields.String(required=True)
    label = fields.String(required=True)
    methods = fields.List(fields.String(validate=validate.OneOf(METHODS)), required=True)
    aims = fields.List(fields.String(validate=validate.OneOf(AIMS)), required=True)
    reference = fields.String(required=True)


class DataModelEntrySchema(Schema):
    """The keys and distribution families of a cell's simulation data model."""

    keys = fields.List(fields.String(), required=True)
    families = fields.List(fields.String(validate=validate.OneOf(FAMILIES)), required=True)


class EstimationEntrySchema(Schema):
    """How a cell answers a precision question (hypothesis.aim estimation)."""

    forms = fields.List(
        fields.List(fields.String()),
        required=True,
        metadata={"description": "The field sets a precision question takes (exactly one)."},
    )
    assurance = fields.Boolean(
        required=True, metadata={"description": "Takes hypothesis.assurance."}
    )


class CellEntrySchema(Schema):
    """One cell (outcome × layout): its analyses, declared fields, forms and example."""

    outcome = fields.String(required=True)
    layout = fields.String(required=True)
    name = fields.String(required=True)
    label = fields.String(required=True)
    analyses = fields.List(fields.Nested(AnalysisEntrySchema), required=True)
    fields_ = fields.List(fields.Nested(DeclaredFieldSchema), required=True, data_key="fields")
    forms = fields.List(
        fields.List(fields.String()),
        required=True,
        metadata={"description": "Alternative sets of fields that make a question complete."},
    )
    solved = fields.String(
        required=True,
        allow_none=True,
        metadata={"description": "The effect field find = effect solves for."},
    )
    interim = fields.Boolean(required=True, metadata={"description": "Offers interim analyses."})
    estimation = fields.Nested(
        EstimationEntrySchema,
        required=True,
        allow_none=True,
        metadata={"description": "Precision questions: their forms; null when not offered."},
    )
    data_model = fields.Nested(DataModelEntrySchema, required=True, allow_none=True)
    example = fields.Dict(
        required=True,
        allow_none=True,
        metadata={"description": "An example question of the cell.", "x-question": True},
    )


class FamilyEntrySchema(Schema):
    """One distribution family and its parameters."""

    name = fields.String(required=True, validate=validate.OneOf(FAMILIES))
    parameters = fields.List(fields.Nested(CommonFieldSchema), required=True)


class CatalogueSchema(Schema):
    """GET /v1/catalogue: the cells (outcome × layout), their analyses and fields, generated
    from the designs; the question's common fields and blocks; the distribution families."""

    cells = fields.List(fields.Nested(CellEntrySchema), required=True)
    question = fields.List(fields.Nested(CommonFieldSchema), required=True)
    blocks = fields.Dict(
        keys=fields.String(),
        values=fields.List(fields.Nested(CommonFieldSchema)),
        required=True,
        metadata={"description": "Block name (dotted for a nested one) -> its fields."},
    )
    families = fields.List(fields.Nested(FamilyEntrySchema), required=True)
    json_schema = fields.String(
        required=True, metadata={"description": "Path of the question's JSON Schema."}
    )
    request_json_schema = fields.String(
        required=True, metadata={"description": "Path of the request body's JSON Schema."}
    )
