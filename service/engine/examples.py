"""The worked example question the engine's docstrings share, written out once."""

from __future__ import annotations

import copy

# Two means, d = 0.5 with SD 1, two-sided 5%, 80% power: 64 per group (Cohen 1988, Table 2.4.1).
_TWO_MEANS = {
    "design": "two_means",
    "find": "sample_size",
    "alpha": 0.05,
    "tails": 2,
    "target_power": 0.8,
    "sample_size": None,
    "allocation_ratio": 1.0,
    "effect": {"difference": 0.5, "sd_control": 1.0, "sd_treatment": 1.0},
    "hypothesis": {"kind": "superiority", "margin": None, "higher_is_better": True},
    "adjustments": {"dropout": 0.0, "cluster": None, "comparisons": 1},
    "method": "analytic",
    "formula": "student",
    "simulation": None,
}


def example_question(**overrides) -> dict:
    """Return a fresh normalized two-means question (d = 0.5) with top-level ``overrides`` applied.

    Examples
    --------
    >>> q = example_question(find="power", target_power=None, sample_size={"per_arm": [30, 30]})
    >>> q["find"], q["effect"]["difference"]
    ('power', 0.5)
    """
    return {**copy.deepcopy(_TWO_MEANS), **overrides}
