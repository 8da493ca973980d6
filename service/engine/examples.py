"""The worked example question the engine's docstrings share, written out once."""

from __future__ import annotations

import copy

# Continuous outcome, two groups, d = 0.5 with SD 1, two-sided 5%, 80% power: 64 per group
# (Cohen 1988, Table 2.4.1).
_CONTINUOUS_TWO_GROUPS = {
    "outcome": "continuous",
    "layout": "two_groups",
    "analysis": "pooled_t",
    "find": "sample_size",
    "alpha": 0.05,
    "alternative": "two-sided",
    "target_power": 0.8,
    "sample_size": None,
    "allocation_ratio": 1.0,
    "allocation_rounding": "each_group",
    "effect": {"difference": 0.5},
    "assumptions": {"sd": 1.0},
    "analysis_options": {},
    "hypothesis": {"aim": "superiority", "margin": None, "higher_is_better": True},
    "adjustments": {"dropout": 0.0, "cluster": None, "comparisons": 1},
    "method": "analytic",
    "simulation": None,
}


def example_question(**overrides) -> dict:
    """Return a fresh normalized question (d = 0.5) with top-level ``overrides`` applied.

    Examples
    --------
    >>> q = example_question(find="power", target_power=None, sample_size={"per_group": [30, 30]})
    >>> q["find"], q["effect"]["difference"]
    ('power', 0.5)
    """
    return {**copy.deepcopy(_CONTINUOUS_TWO_GROUPS), **overrides}
