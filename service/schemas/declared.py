"""marshmallow fields and block schemas generated from a design's declared ``Field``s.

A design module declares its inputs as plain data (``service.engine.designs.base.Field``); this
module turns one declaration into a strict marshmallow field (type, range, choices, length) and
one block of a design (``effect``, ``assumptions`` or ``analysis_options``) into a ``Strict``
schema. Requiredness is not decided here: it depends on the design's forms, on ``find`` and on a
posted data model, and ``cell.py`` decides it.
"""

from __future__ import annotations

from typing import Any

from marshmallow import Schema
from marshmallow import fields as mfields

from .fields import Choice, Flag, Interval, Number, NumberList, Strict, Whole
from .shared import per_design


def interval(field: Any) -> Interval:
    """The numeric range a declaration allows."""
    return Interval(
        field.minimum,
        field.maximum,
        low_open=bool(field.exclusive_minimum),
        high_open=bool(field.exclusive_maximum),
    )


def describe(field: Any) -> str:
    """The help text, with the unit when the declaration has one."""
    return f"{field.help} ({field.unit})" if field.unit else field.help


def marshmallow_field(field: Any) -> mfields.Field:
    """A strict marshmallow field for one declaration (never required: the forms decide)."""
    text = describe(field)
    if field.type == "number":
        return Number(interval(field), description=text)
    if field.type == "integer":
        return Whole(interval(field), description=text)
    if field.type == "boolean":
        return Flag(description=text, default=None)
    if field.type == "choice":
        return Choice(tuple(field.choices), description=text)
    if field.type == "number_list":
        item = Number(interval(field), required=True, description=f"one value of {field.name}")
        return NumberList(item, min_length=field.min_items or 1, description=text)
    raise ValueError(f"field {field.name}: unknown declared type {field.type!r}")


def block_fields(design: Any, block: str) -> tuple:
    """The declarations of one block of a design, in declaration order."""
    return tuple(f for f in design.fields if f.block == block)


@per_design
def block_schema(design: Any, block: str) -> Schema:
    """The shared schema instance of one block of a design (designs are frozen: hashable)."""
    spec = {f.name: marshmallow_field(f) for f in block_fields(design, block)}
    name = f"{design.outcome.title()}{design.layout.title()}{block.title()}".replace("_", "")
    return Strict.from_dict(spec, name=f"{name}Schema")()


def allowed(field: Any) -> str:
    """What a declared field accepts, in words: 'a number > 0', 'one of days, weeks'."""
    made = marshmallow_field(field)
    if isinstance(made, Number):
        return made.allowed()
    if isinstance(made, NumberList):
        return f"a list of at least {made.min_length} numbers"
    if isinstance(made, Choice):
        return f"one of {', '.join(made.choices)}"
    return "true or false"


def required_message(field: Any) -> str:
    """'is required: a number > 0' — what a missing declared field must be."""
    return f"is required: {allowed(field)}"
