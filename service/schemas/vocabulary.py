"""The fixed words of a question and the design facts the schema modules share.

Allowed values of ``find``, ``method``, the hypothesis kinds and decision rules; which designs
have two arms or take a margin; how many arms a design has and their relative sizes.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service.engine.designs import DESIGN_NAMES

FINDS = ("sample_size", "power", "effect")
METHODS = ("analytic", "simulation")
KINDS = ("superiority", "noninferiority", "equivalence")
DECISION_RULES = ("point", "lower_bound")
TWO_ARM = ("two_means", "two_proportions", "rank_sum", "survival_logrank")
MARGIN_DESIGNS = ("two_means", "two_proportions")
SEED_LIMIT = 2**53
MAX_N = 10**9


def valid_design(data: Any) -> str | None:
    """The posted design when it is a known one, else None."""
    design = data.get("design") if isinstance(data, Mapping) else None
    return design if isinstance(design, str) and design in DESIGN_NAMES else None


def valid_find(data: Any) -> str:
    """The posted ``find`` when valid, else the default."""
    find = data.get("find") if isinstance(data, Mapping) else None
    return find if isinstance(find, str) and find in FINDS else "sample_size"


def arm_count(design: str, effect: Mapping | None) -> int | None:
    """Number of arms of a design (None when the ANOVA group count is not known)."""
    if design in TWO_ARM:
        return 2
    if design == "anova_oneway":
        groups = (effect or {}).get("groups")
        if groups is None and (effect or {}).get("group_means") is not None:
            groups = len(effect["group_means"])
        return groups
    return 1


def allocation_weights(design: str, ratio: float, arms: int) -> list[float]:
    """Relative arm sizes, control first: [1, ratio] for two-arm designs, equal otherwise."""
    return [1.0, ratio] if design in TWO_ARM else [1.0] * arms
