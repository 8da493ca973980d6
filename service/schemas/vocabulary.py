"""The fixed words of a question, and the cells (outcome × layout) read from the design registry.

The cells are never listed here: ``cells()`` asks the engine's registry each time, so a design
registered later (a new module, or a test's toy design) is known to every schema at once.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service.engine import designs
from service.engine.designs.base import AIMS, BLOCKS, METHODS

__all__ = ["AIMS", "BLOCKS", "METHODS"]  # the engine's words, re-exported for the schema modules

FINDS = ("sample_size", "power", "effect", "precision")  # precision: estimation only
ALTERNATIVES = ("two-sided", "one-sided")
ROUNDINGS = ("each_group", "exact_ratio")
DECISION_RULES = ("point", "lower_bound")
# Layouts whose groups are sized by the treatment:control allocation ratio (a word of the
# vocabulary, not a design: every two-group cell takes it).
RATIO_LAYOUTS = ("two_groups",)
SEED_LIMIT = 2**53
MAX_N = 10**9


def cells() -> tuple:
    """Every registered design, in registry order."""
    return tuple(designs.all())


def outcomes() -> tuple[str, ...]:
    """The outcomes of the registered cells, in first-seen order."""
    return tuple(dict.fromkeys(d.outcome for d in cells()))


def layouts(outcome: str | None = None) -> tuple[str, ...]:
    """The layouts of the registered cells (of one outcome when given), in first-seen order."""
    return tuple(dict.fromkeys(d.layout for d in cells() if outcome in (None, d.outcome)))


def cells_text() -> str:
    """Every cell, quoted, for messages that list what is allowed."""
    return ", ".join(f'"{d.cell}"' for d in cells())


def cell_of(data: Any) -> Any | None:
    """The design of the posted outcome and layout, or None when they name no cell."""
    if not isinstance(data, Mapping):
        return None
    outcome, layout = data.get("outcome"), data.get("layout")
    if not isinstance(outcome, str) or not isinstance(layout, str):
        return None
    found = [d for d in cells() if d.outcome == outcome and d.layout == layout]
    return found[0] if found else None


def valid_find(data: Any) -> str:
    """The posted ``find`` when valid, else the default."""
    find = data.get("find") if isinstance(data, Mapping) else None
    return find if isinstance(find, str) and find in FINDS else "sample_size"


def takes_ratio(design: Any) -> bool:
    """True when the cell's groups are sized by an allocation ratio."""
    return design.layout in RATIO_LAYOUTS
