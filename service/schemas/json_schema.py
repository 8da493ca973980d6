"""The JSON Schema (draft 2020-12) of a posted question, generated from the same declarations.

Served at ``GET /v1/catalogue/question.schema.json`` for form builders, and used as the
OpenAPI document's ``Question`` component (OpenAPI 3.1 schemas are JSON Schema 2020-12). The
common fields come from ``QuestionSchema``'s strict fields (types, ranges, enums, descriptions);
each registered cell adds one ``if``/``then`` branch giving its analyses, the fields of its
``effect``, ``assumptions`` and ``analysis_options`` blocks and the shape of its data model.
The schema refuses wrong types, ranges, unknown keys and analyses outside the cell; what depends
on several fields at once (forms, find, a margin's sign) is checked by the API, whose 422
problem names the field.
"""

from __future__ import annotations

from typing import Any

from marshmallow import Schema
from marshmallow import fields as mfields

from . import declared
from .data_models import FAMILY_PARAMS, data_keys, families_for
from .fields import Choice, Flag, Number, NumberList, Obj, Text, Whole
from .vocabulary import BLOCKS, cells, layouts, outcomes

DIALECT = "https://json-schema.org/draft/2020-12/schema"
SCHEMA_PATH = "/v1/catalogue/question.schema.json"


def _nullable(schema: dict) -> dict:
    out = dict(schema)
    kind = out.get("type")
    if isinstance(kind, str):
        out["type"] = [kind, "null"]
    if "enum" in out and None not in out["enum"]:
        out["enum"] = [*out["enum"], None]
    return out


def field_schema(field: mfields.Field) -> dict:
    """One strict marshmallow field as JSON Schema (null allowed unless required)."""
    meta = {k: v for k, v in field.metadata.items() if k != "enum"}
    if isinstance(field, Whole):
        out: dict = {"type": "integer", **meta}
    elif isinstance(field, Number):
        out = {"type": "number", **meta}
    elif isinstance(field, Flag):
        out = {"type": "boolean", **meta}
    elif isinstance(field, Choice):
        out = {"type": "string", **meta, "enum": list(field.choices)}
    elif isinstance(field, NumberList):
        out = {"type": "array", "items": field_schema(field.inner), **meta}
        out["minItems"] = field.min_length
    elif isinstance(field, Obj):
        out = {**object_schema(field.nested), **meta}  # type: ignore[arg-type]
    elif isinstance(field, Text) or isinstance(field, mfields.String):
        out = {"type": "string", **meta}
    else:
        out = {"type": "object", **meta}
    return out if field.required else _nullable(out)


def object_schema(schema: type[Schema] | Schema) -> dict:
    """A ``Strict`` schema as a closed JSON object."""
    declared_fields = schema._declared_fields if isinstance(schema, type) else schema.fields
    return {
        "type": "object",
        "properties": {name: field_schema(f) for name, f in declared_fields.items()},
        "required": [name for name, f in declared_fields.items() if f.required],
        "additionalProperties": False,
    }


def declared_schema(field: Any) -> dict:
    """One declared design field as JSON Schema, with its label and unit."""
    out = field_schema(declared.marshmallow_field(field))
    out["title"] = field.label
    if field.default is not None:
        out["default"] = field.default
    if field.unit:
        out["x-unit"] = field.unit
    return out


def block_schema(design: Any, block: str) -> dict:
    """One cell block (effect, assumptions, analysis_options) as a closed, nullable object."""
    names = declared.block_fields(design, block)
    return {
        "type": ["object", "null"],
        "properties": {f.name: declared_schema(f) for f in names},
        "additionalProperties": False,
    }


def distribution_schema(family: str) -> dict:
    """``{"family": name, ...parameters}`` for one family."""
    from .data_models import FAMILY_SCHEMAS

    out = object_schema(FAMILY_SCHEMAS[family])
    out["properties"]["family"] = {"const": family}
    out["required"] = ["family", *FAMILY_PARAMS[family]]
    return out


def data_schema(design: Any) -> dict:
    """The cell's data model (null only, when the cell takes none)."""
    families = families_for(design)
    keys = data_keys(design)
    if getattr(design, "simulation", None) is None or not families or not keys:
        return {"type": "null", "description": f"no data model for {design.cell}"}
    one = {"oneOf": [distribution_schema(f) for f in families]}
    if keys == ("groups",):
        props: dict = {"groups": {"type": "array", "items": one, "minItems": 2}}
    else:
        props = {k: one for k in keys}
    return {
        "type": ["object", "null"],
        "properties": props,
        "required": list(keys),
        "additionalProperties": False,
    }


def cell_branch(design: Any) -> dict:
    """``if`` the question names this cell, ``then`` its analyses, blocks and data model."""
    names = [a.name for a in design.analyses]
    then: dict = {
        "properties": {
            "analysis": {"enum": [*names, None]},
            **{block: block_schema(design, block) for block in BLOCKS},
            "simulation": {"properties": {"data": data_schema(design)}},
        }
    }
    return {
        "if": {
            "properties": {
                "outcome": {"const": design.outcome},
                "layout": {"const": design.layout},
            },
            "required": ["outcome", "layout"],
        },
        "then": then,
        "description": design.label,
    }


def question_json_schema() -> dict:
    """The JSON Schema 2020-12 document of a posted question, for every registered cell."""
    from .question import QuestionSchema

    body = object_schema(QuestionSchema)
    props = body["properties"]
    props["outcome"] = {**props["outcome"], "type": "string", "enum": list(outcomes())}
    props["layout"] = {**props["layout"], "type": "string", "enum": list(layouts())}
    analyses = sorted({a.name for d in cells() for a in d.analyses})
    props["analysis"] = {**props["analysis"], "type": ["string", "null"], "enum": [*analyses, None]}
    for block in BLOCKS:
        props[block] = {**props[block], "type": ["object", "null"]}
    pairs = [
        {"properties": {"outcome": {"const": d.outcome}, "layout": {"const": d.layout}}}
        for d in cells()
    ]
    return {
        "$schema": DIALECT,
        "title": "sizewise question",
        "description": "A sample-size, power or detectable-effect question. The cell (outcome × "
        "layout) decides the analyses and the fields of effect, assumptions and "
        "analysis_options; rules across fields (which alternative fields form a complete "
        "question, find, the margin's sign) are checked by the API.",
        **body,
        "allOf": [{"anyOf": pairs}, *(cell_branch(d) for d in cells())],
    }
