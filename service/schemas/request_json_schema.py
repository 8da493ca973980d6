"""The JSON Schema (draft 2020-12) of the body of POST /v1/requests, generated from its schema.

Served at ``GET /v1/catalogue/request.schema.json``. The envelope (protocol, requester,
deadline, explorations …) is read off ``RequestCreateSchema``'s marshmallow fields and
validators; the ``question`` member points at the question's own generated schema, kept once
under ``$defs``. As for the question, rules across fields (an exploration's grid paths and cost
against the question) are checked by the API, whose 422 problem names the field.
"""

from __future__ import annotations

from marshmallow import Schema, fields, validate

from .json_schema import DIALECT, question_json_schema

REQUEST_SCHEMA_PATH = "/v1/catalogue/request.schema.json"
# An ISO date as the API's Date field takes it; the format keyword alone is not asserted.
DATE_PATTERN = r"^\d{4}-\d{2}-\d{2}$"


def _validators(field: fields.Field, out: dict) -> dict:
    """The field's Length, Range, Regexp and OneOf validators as JSON Schema keywords."""
    array = out.get("type") == "array" or "array" in (out.get("type") or ())
    for v in field.validators:
        if isinstance(v, validate.Length):
            lo, hi = ("minItems", "maxItems") if array else ("minLength", "maxLength")
            if v.min is not None:
                out[lo] = v.min
            if v.max is not None:
                out[hi] = v.max
        elif isinstance(v, validate.Range):
            if v.min is not None:
                out["minimum"] = v.min
            if v.max is not None:
                out["maximum"] = v.max
        elif isinstance(v, validate.Regexp):
            out["pattern"] = v.regex.pattern
        elif isinstance(v, validate.OneOf):
            out["enum"] = list(v.choices)
    return out


def api_field_schema(field: fields.Field) -> dict:
    """One API marshmallow field as JSON Schema (null allowed only where the field allows it)."""
    from .requests import QuestionField

    description = field.metadata.get("description")
    if isinstance(field, QuestionField):
        out: dict = {"$ref": "#/$defs/question"}
    elif isinstance(field, fields.Nested):
        out = api_object_schema(field.nested)  # type: ignore[arg-type]
    elif isinstance(field, fields.List):
        out = {"type": "array", "items": api_field_schema(field.inner)}
    elif isinstance(field, fields.Dict):
        out = {"type": "object"}
        if field.key_field is not None:
            out["propertyNames"] = api_field_schema(field.key_field)
        if field.value_field is not None:
            out["additionalProperties"] = api_field_schema(field.value_field)
    elif isinstance(field, fields.Email):
        out = {"type": "string", "format": "email"}
    elif isinstance(field, fields.Date):
        out = {"type": "string", "format": "date", "pattern": DATE_PATTERN}
    elif isinstance(field, fields.Integer):
        out = {"type": "integer"}
    elif isinstance(field, fields.Number):
        out = {"type": "number"}
    elif isinstance(field, fields.Boolean):
        out = {"type": "boolean"}
    elif isinstance(field, fields.String):
        out = {"type": "string"}
    else:
        out = {}
    out = _validators(field, out)
    if field.allow_none:
        out = {"anyOf": [out, {"type": "null"}]}
    if description:
        out["description"] = description
    return out


def api_object_schema(schema: type[Schema] | Schema) -> dict:
    """A strict API schema as a closed JSON object."""
    instance = schema() if isinstance(schema, type) else schema
    loaded = instance.load_fields
    out: dict = {
        "type": "object",
        "properties": {f.data_key or n: api_field_schema(f) for n, f in loaded.items()},
        "required": [f.data_key or n for n, f in loaded.items() if f.required],
        "additionalProperties": False,
    }
    if (instance.__doc__ or "").strip():
        out["description"] = " ".join(instance.__doc__.split())
    return out


def request_json_schema() -> dict:
    """The JSON Schema 2020-12 document of a request body, the question's schema under $defs."""
    from .requests import RequestCreateSchema

    question = {k: v for k, v in question_json_schema().items() if k != "$schema"}
    body = api_object_schema(RequestCreateSchema)
    body.pop("description", None)
    return {
        "$schema": DIALECT,
        "title": "sizewise request",
        "description": "The body of POST /v1/requests: a sample-size question with the protocol "
        "and requester it belongs to. Rules across fields (which fields form a complete "
        "question, an exploration's grid paths and cost) are checked by the API.",
        **body,
        "$defs": {"question": question},
    }
