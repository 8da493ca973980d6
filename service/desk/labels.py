"""The one place the desk reads a stored question: its cell's filter value and human label.

A cell is outcome × layout (issue 10's vocabulary); a question stored before it names a
``design`` instead, which maps to its cell here. Nothing else in the desk looks inside a question.
"""

from __future__ import annotations

from sqlalchemy import ColumnElement, or_

from service.store.models import Request

# Old design name -> (outcome, layout), as issue 10's vocabulary maps them.
_OLD_DESIGNS = {
    "one_mean": ("continuous", "single_group"),
    "paired_mean": ("continuous", "paired"),
    "two_means": ("continuous", "two_groups"),
    "two_proportions": ("binary", "two_groups"),
    "anova_oneway": ("continuous", "k_groups"),
    "correlation": ("association", "single_group"),
    "rank_sum": ("ordinal", "two_groups"),
    "survival_logrank": ("time_to_event", "two_groups"),
}
_OUTCOMES = {
    "continuous": "Continuous outcome",
    "binary": "Binary outcome",
    "ordinal": "Ordinal outcome",
    "time_to_event": "Time-to-event outcome",
    "association": "Association",
}
_LAYOUTS = {
    "single_group": "one group",
    "paired": "paired",
    "two_groups": "two groups",
    "k_groups": "several groups",
}


def _cell(question: dict) -> tuple[str, str] | None:
    outcome, layout = question.get("outcome"), question.get("layout")
    if outcome and layout:
        return str(outcome), str(layout)
    return _OLD_DESIGNS.get(str(question.get("design")))


def cell_value(question: dict) -> str:
    """The filter value of the question's cell, ``outcome/layout`` (empty when unknown)."""
    cell = _cell(question or {})
    return f"{cell[0]}/{cell[1]}" if cell else ""


def cell_label(value: str) -> str:
    """The human label of a cell's filter value: 'Continuous outcome, two groups'."""
    outcome, _, layout = value.partition("/")
    try:
        from service.engine import designs

        return designs.get(outcome, layout).label  # the engine's own label, when it has one
    except Exception:  # before issue 10's registry, or an unknown cell: say it plainly
        pass
    if outcome not in _OUTCOMES:
        return value or "Unknown design"
    return f"{_OUTCOMES[outcome]}, {_LAYOUTS.get(layout, layout.replace('_', ' '))}"


def question_label(question: dict) -> str:
    """The human label of a stored question's cell."""
    return cell_label(cell_value(question))


def cells() -> list[str]:
    """Every cell's filter value: the engine's registry when it has one, else the vocabulary's."""
    from service.engine import designs

    registry = getattr(designs, "all", None)
    if callable(registry):
        return [f"{d.outcome}/{d.layout}" for d in registry()]
    return [f"{o}/{lay}" for o, lay in _OLD_DESIGNS.values()]


def where_cell(value: str) -> ColumnElement[bool]:
    """The SQL condition selecting requests of the cell ``value`` (the stored design column)."""
    names = [name for name, cell in _OLD_DESIGNS.items() if f"{cell[0]}/{cell[1]}" == value]
    # Matches both the old design names and a design column holding the cell itself.
    return or_(Request.design == value, Request.design.in_(names))


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
