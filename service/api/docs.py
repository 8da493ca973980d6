"""Per-view OpenAPI metadata, read by service.api.openapi to build the document."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

from marshmallow import Schema


@dataclass(frozen=True)
class Operation:
    """What the OpenAPI document says about one view."""

    summary: str
    tag: str
    status: int
    # A marshmallow schema, a plain JSON Schema dict, or None (a body described by media_type).
    response: type[Schema] | Schema | dict | None
    description: str = ""
    body: type[Schema] | None = None
    body_required: bool = True
    query: type[Schema] | None = None
    errors: Sequence[int] = (500,)
    headers: dict[str, str] = field(default_factory=dict)
    request_headers: dict[str, str] = field(default_factory=dict)
    media_type: str = "application/json"
    # Other answers than ``status`` that are not errors: code -> description (304 has no body).
    also: dict[int, str] = field(default_factory=dict)


def operation(summary: str, *, tag: str, status: int = 200, response=None, **kwargs) -> Callable:
    """Attach OpenAPI metadata to a view function."""

    def mark(view: Callable) -> Callable:
        view.openapi = Operation(summary, tag, status, response, **kwargs)
        return view

    return mark
