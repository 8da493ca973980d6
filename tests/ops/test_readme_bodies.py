"""README's "Request bodies" table names exactly the required fields of every body the API takes,
and only optional fields that exist (checked against the marshmallow schemas themselves)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from marshmallow import Schema, fields

REPO = Path(__file__).resolve().parents[2]


def _table() -> dict[str, tuple[list[str], list[str]]]:
    readme = (REPO / "README.md").read_text()
    match = re.search(r"^### Request bodies\n(.*?)(?=^##)", readme, re.M | re.S)
    assert match, "README has no '### Request bodies' section"
    rows = {}
    for line in match.group(1).splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) != 3 or not re.match(r"`(POST|PUT|PATCH) ", cells[0]):
            continue
        call = cells[0].strip("`")
        rows[call] = (re.findall(r"`([^`]+)`", cells[1]), re.findall(r"`([^`]+)`", cells[2]))
    return rows


def _fields(schema: Schema, prefix: str = "", required: bool = True) -> dict[str, bool]:
    """Dotted path -> required, through nested schemas (a child of an optional field is optional)."""
    found = {}
    for name, field in schema.load_fields.items():
        path = prefix + (field.data_key or name)
        needed = required and field.required
        if isinstance(field, fields.Nested):  # an object is documented by its members
            found |= _fields(field.schema, path + ".", needed)
        else:
            found[path] = needed
    return found


def _body_schemas(app) -> dict[str, Schema]:
    """'POST /v1/requests/{id}/assign' -> the schema its view loads, for every view with a body."""
    out = {}
    for rule in app.url_map.iter_rules():
        op = getattr(app.view_functions[rule.endpoint], "openapi", None)
        if op is None or op.body is None:
            continue
        path = re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", rule.rule).replace("{request_id}", "{id}")
        for method in rule.methods - {"HEAD", "OPTIONS"}:
            body = op.body
            out[f"{method} {path}"] = body() if isinstance(body, type) else body
    return out


def test_every_body_the_api_takes_has_a_row(app):
    assert set(_body_schemas(app)) == set(_table())


@pytest.mark.parametrize("call", sorted(_table()))
def test_the_row_names_the_required_fields_and_real_optional_ones(app, call):
    required, optional = _table()[call]
    schema = _body_schemas(app)[call]
    declared = _fields(schema)
    assert sorted(required) == sorted(p for p, needed in declared.items() if needed), call
    unknown = [p for p in optional if p not in declared or declared[p]]
    assert not unknown, f"{call}: not optional fields of the body: {unknown}"
