"""The design registry: one module per cell of outcome × layout, each declaring a ``DESIGN``.

``get(outcome, layout)`` returns a cell's Design, ``all()`` every registered one (catalogue
order), ``register(design)`` adds one (a new cell is one module plus one line below, or a call
to ``register`` from outside, as the toy-design test does).
"""

from __future__ import annotations

from ..errors import QuestionError
from .base import Analysis, Design, Field, Phrases, SimulationModel, Solution

__all__ = ["Analysis", "Design", "Field", "Phrases", "SimulationModel", "Solution"]

_REGISTRY: dict[tuple[str, str], Design] = {}
_LOADED = False


def _load() -> None:
    global _LOADED
    if _LOADED:
        return
    from . import (
        association_single_group,
        binary_paired,
        binary_regression,
        binary_single_group,
        binary_treatments_vs_control,
        binary_two_groups,
        binary_two_stage,
        continuous_crossover,
        continuous_k_groups,
        continuous_paired,
        continuous_regression,
        continuous_repeated_measures,
        continuous_single_group,
        continuous_treatments_vs_control,
        continuous_two_groups,
        count_two_groups,
        diagnostic_single_group,
        diagnostic_two_groups,
        lognormal_crossover,
        lognormal_two_groups,
        ordinal_two_groups,
        time_to_event_regression,
        time_to_event_two_groups,
    )

    for module in (
        continuous_two_groups,
        continuous_paired,
        continuous_single_group,
        binary_two_groups,
        continuous_k_groups,
        association_single_group,
        ordinal_two_groups,
        time_to_event_two_groups,
        continuous_treatments_vs_control,
        continuous_repeated_measures,
        continuous_crossover,
        lognormal_crossover,
        lognormal_two_groups,
        binary_treatments_vs_control,
        count_two_groups,
        continuous_regression,
        binary_regression,
        time_to_event_regression,
        diagnostic_two_groups,
        diagnostic_single_group,
        binary_single_group,
        binary_two_stage,
        binary_paired,
    ):
        _REGISTRY.setdefault((module.DESIGN.outcome, module.DESIGN.layout), module.DESIGN)
    _LOADED = True


def register(design: Design) -> Design:
    """Add (or replace) the cell ``design`` describes; return it."""
    _load()
    _REGISTRY[(design.outcome, design.layout)] = design
    return design


def unregister(outcome: str, layout: str) -> None:
    """Remove a registered cell (tests that register a toy design clean up with this)."""
    _load()
    _REGISTRY.pop((outcome, layout), None)


def all() -> tuple[Design, ...]:  # noqa: A001 - the contract's name (VOCAB §8)
    """Return every registered design, in catalogue order."""
    _load()
    return tuple(_REGISTRY.values())


def cells() -> list[str]:
    """Every registered cell as people read it: 'continuous × two_groups'."""
    return [d.cell for d in all()]


def get(outcome: object, layout: object) -> Design:
    """Return the design of a cell; QuestionError on ``outcome`` or ``layout`` when unknown."""
    _load()
    design = _REGISTRY.get((outcome, layout))  # type: ignore[arg-type]
    if design is not None:
        return design
    listed = ", ".join(f'"{c}"' for c in cells())
    field = "layout" if any(d.outcome == outcome for d in all()) else "outcome"
    return _refuse(field, f"no cell {outcome!r} × {layout!r}; the cells are {listed}")


def _refuse(field: str, message: str) -> Design:
    raise QuestionError(field, message)
