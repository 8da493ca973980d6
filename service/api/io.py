"""Reading bodies and query strings: JSON objects only, unknown fields refused.

The body parser is strict where Python's json module is lenient: a duplicate key, nesting deeper
than ``MAX_DEPTH``, a lone surrogate (not Unicode, and unstorable) and a control character other
than tab, newline and carriage return (NUL cannot be stored in PostgreSQL text) are refused with
the JSON path of the offending value. The same text rule holds for query values and path ids.
"""

from __future__ import annotations

import json
import re
from typing import Any

from flask import request
from marshmallow import Schema

from service.schemas.fields import CONTROL

from .errors import ApiError, NotFound, ValidationFailed, flatten_errors

JSON_TYPES = ("application/json",)
# Deepest legitimate body (a question inside a submission) is 6 levels; 64 leaves room and keeps
# the parser far from Python's recursion limit.
MAX_DEPTH = 64
# C0 controls but tab, newline and carriage return; DEL and the C1 controls (the documents'
# TEXT_PATTERN says the same).
_CONTROL = CONTROL
_SURROGATE = re.compile(r"[\ud800-\udfff]")


class _DuplicateKey(ValueError):
    def __init__(self, key: str):
        super().__init__(key)
        self.key = key


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict:
    seen: dict = {}
    for key, value in pairs:
        if key in seen:
            raise _DuplicateKey(key)
        seen[key] = value
    return seen


def nesting_depth(text: str) -> int:
    """Return the deepest bracket nesting of JSON ``text`` (brackets inside strings ignored)."""
    depth = deepest = 0
    in_string = escaped = False
    for char in text:
        if in_string:
            if escaped:
                escaped = False
            elif char == "\\":
                escaped = True
            elif char == '"':
                in_string = False
        elif char == '"':
            in_string = True
        elif char in "[{":
            depth += 1
            deepest = max(deepest, depth)
        elif char in "]}":
            depth -= 1
    return deepest


def text_problem(value: str) -> str | None:
    """Why ``value`` cannot be stored as text (None when it can): lone surrogates, controls."""
    if _SURROGATE.search(value):
        return "contains a lone UTF-16 surrogate (\\ud800-\\udfff), which is not a character"
    bad = _CONTROL.search(value)
    if bad:
        return (
            f"contains the control character U+{ord(bad.group()):04X}; only tab, newline and "
            "carriage return are allowed"
        )
    return None


def _text_errors(value: Any, path: str, errors: dict[str, list[str]]) -> None:
    if isinstance(value, str):
        message = text_problem(value)
        if message:
            errors.setdefault(path or "body", []).append(message)
    elif isinstance(value, dict):
        for key, item in value.items():
            message = text_problem(key)
            if message:
                errors.setdefault(path or "body", []).append(f"a key {message}")
                continue
            _text_errors(item, f"{path}.{key}" if path else key, errors)
    elif isinstance(value, list):
        for index, item in enumerate(value):
            _text_errors(item, f"{path}.{index}" if path else str(index), errors)


def parse_json(text: str) -> Any:
    """Parse a JSON body strictly (see the module docstring); ApiError/ValidationFailed if not."""
    depth = nesting_depth(text)
    if depth > MAX_DEPTH:
        raise ApiError(
            f"the body nests {depth} levels deep; at most {MAX_DEPTH} are allowed",
            title="Malformed JSON",
            slug="malformed-json",
            errors={"body": [f"nested deeper than {MAX_DEPTH} levels"]},
        )
    try:
        body = json.loads(text, object_pairs_hook=_no_duplicates)
    except _DuplicateKey as exc:
        raise ApiError(
            f"the body gives the key {exc.key[:60]!r} twice in one object; give each key once",
            title="Malformed JSON",
            slug="malformed-json",
            errors={"body": [f"duplicate key {exc.key[:60]!r}"]},
        ) from None
    except RecursionError:  # unreachable behind the depth check; kept as a backstop
        raise ApiError(
            f"the body nests too deep; at most {MAX_DEPTH} levels are allowed",
            title="Malformed JSON",
            slug="malformed-json",
        ) from None
    except ValueError as exc:
        raise ApiError(
            f"the body is not valid JSON: {exc}", title="Malformed JSON", slug="malformed-json"
        ) from None
    errors: dict[str, list[str]] = {}
    _text_errors(body, "", errors)
    if errors:
        raise ValidationFailed(
            f"{len(errors)} field(s) hold text that cannot be stored: {', '.join(sorted(errors))}",
            errors=errors,
        )
    return body


def raw_json_body(*, optional: bool = False) -> dict | None:
    """Return the posted JSON object; None when ``optional`` and the body is empty."""
    data = request.get_data(cache=True)
    if optional and not data.strip():
        return None
    mimetype = request.mimetype or ""
    if mimetype not in JSON_TYPES and not mimetype.endswith("+json"):
        raise ApiError(
            f"the body must be application/json; got {mimetype or 'no Content-Type'}",
            status=415,
            title="Unsupported media type",
            slug="unsupported-media-type",
        )
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ApiError(
            f"the body is not valid UTF-8: {exc.reason} at byte {exc.start}",
            title="Malformed JSON",
            slug="malformed-json",
        ) from None
    body = parse_json(text)
    if not isinstance(body, dict):
        raise ValidationFailed(
            f"the body must be a JSON object; got {type(body).__name__}",
            errors={"body": ["must be a JSON object"]},
        )
    return body


def load_body(schema: Schema, *, optional: bool = False) -> tuple[dict | None, dict]:
    """Return (raw body, loaded data) for ``schema``; an empty optional body loads as {}."""
    raw = raw_json_body(optional=optional)
    return raw, schema.load(raw or {})


def load_query(schema: Schema) -> dict[str, Any]:
    """Return the query string loaded by ``schema``; repeated or unknown parameters are refused."""
    repeated = [k for k, v in request.args.lists() if len(v) > 1]
    if repeated:
        raise ValidationFailed(
            "each query parameter may be given once",
            errors={f"query.{k}": ["given more than once"] for k in repeated},
        )
    refuse_bad_query_text()
    errors = schema.validate(request.args.to_dict())
    if errors:
        flat = flatten_errors(errors)
        raise ValidationFailed(
            f"{len(flat)} query parameter(s) failed validation: {', '.join(sorted(flat))}",
            errors={f"query.{k}": v for k, v in flat.items()},
        )
    return schema.load(request.args.to_dict())


def reject_query() -> None:
    """Refuse any query parameter on an endpoint that takes none."""
    if request.args:
        raise ValidationFailed(
            "this endpoint takes no query parameters",
            errors={f"query.{k}": ["unknown parameter"] for k in request.args},
        )


def refuse_bad_query_text() -> None:
    """Refuse query names or values holding control characters or lone surrogates (422)."""
    errors: dict[str, list[str]] = {}
    for key, values in request.args.lists():
        for value in (key, *values):
            message = text_problem(value)
            if message:
                errors.setdefault(f"query.{key[:40]}", []).append(message)
    if errors:
        raise ValidationFailed(
            "a query parameter holds text that cannot be used: " + ", ".join(sorted(errors)),
            errors=errors,
        )


def refuse_bad_path_text() -> None:
    """Before every request: a path id with a control character names nothing (404)."""
    for value in (request.view_args or {}).values():
        if isinstance(value, str) and text_problem(value):
            raise NotFound(f"no resource at {request.path!r}")
