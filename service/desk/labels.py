"""The one place the desk reads a stored question: its cell's filter value and human label.

A cell is outcome × layout; its label is the registered design's own (``design.label``).
Nothing else in the desk looks inside a question.
"""

from __future__ import annotations

from sqlalchemy import ColumnElement

from service.engine import designs
from service.engine.errors import QuestionError
from service.store.models import Request
from service.store.requests import design_key


def cell_value(question: dict) -> str:
    """The filter value of the question's cell, ``outcome/layout`` (empty when unknown)."""
    outcome, layout = (question or {}).get("outcome"), (question or {}).get("layout")
    return design_key(question) if outcome and layout else ""


def cell_label(value: str) -> str:
    """The human label of a cell's filter value: 'Continuous outcome, two groups'."""
    outcome, _, layout = value.partition("/")
    try:
        return designs.get(outcome, layout).label
    except QuestionError:  # a cell no longer registered: say so rather than fail the page
        return f"Unknown cell ({value})" if value else "Unknown cell"


def question_label(question: dict) -> str:
    """The human label of a stored question's cell."""
    return cell_label(cell_value(question))


def cells() -> list[str]:
    """Every registered cell's filter value, in catalogue order."""
    return [design_key({"outcome": d.outcome, "layout": d.layout}) for d in designs.all()]


def where_cell(value: str) -> ColumnElement[bool]:
    """The SQL condition selecting requests of the cell ``value`` (the stored design column)."""
    # The filter value is the column's own value (store.requests.design_key).
    return Request.design == value


# Blocks of a question whose numbers a sensitivity grid may vary, and the top-level numbers.
_GRID_BLOCKS = ("effect", "assumptions", "adjustments")
_GRID_TOP = ("alpha", "target_power", "allocation_ratio")


def grid_paths(question: dict) -> list[str]:
    """Dotted paths of the question's numbers a sensitivity grid can vary (suggestions only)."""
    paths = [k for k in _GRID_TOP if _is_number((question or {}).get(k))]
    for block in _GRID_BLOCKS:
        for key, value in ((question or {}).get(block) or {}).items():
            if _is_number(value):
                paths.append(f"{block}.{key}")
            elif isinstance(value, dict):
                paths += [f"{block}.{key}.{k}" for k, v in value.items() if _is_number(v)]
    return paths


def _is_number(value) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)
