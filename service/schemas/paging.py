"""Query fields and body schema parts of the cursor-paginated lists (see service.api.pagination)."""

from __future__ import annotations

from marshmallow import fields

DEFAULT_LIMIT = 20
MAX_LIMIT = 100


def limit_field() -> fields.Integer:
    """The ``limit`` query parameter: items per page, bounded."""
    from .requests import INT_ERRORS, in_range

    return fields.Integer(
        load_default=DEFAULT_LIMIT,
        error_messages=INT_ERRORS,
        validate=in_range(1, MAX_LIMIT),
        metadata={"description": f"Items per page, 1 to {MAX_LIMIT} ({DEFAULT_LIMIT})."},
    )


def cursor_field() -> fields.String:
    """The ``cursor`` query parameter: where the next page starts (from a ``next`` link)."""
    from .requests import length

    return fields.String(
        validate=length(1, 200),
        metadata={"description": "Opaque; copied from the 'next' link of the previous page."},
    )


def next_field(**kwargs) -> fields.String:
    """The ``next`` member of a page: the absolute URL of the next page, null after the last."""
    return fields.Url(
        allow_none=True,
        **kwargs,
        metadata={"description": "Absolute URL of the next page; null on the last page."},
    )
