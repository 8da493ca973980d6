"""Normalized questions for the engine tests, with the schema's defaults (DEVELOPERS.md).

One builder for every engine test file, so that a change to the question contract is made here
once. The running example of each design is the effect used when a test does not name one.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from scipy import stats

from service.engine import adjust
from service.engine.designs import FORMULAS, TESTS, get

MEDIAN_CONTROL = 12.0

EFFECTS = {
    "two_means": {"difference": 0.5, "sd_control": 1.0, "sd_treatment": 1.0},
    "one_mean": {"difference": 0.5, "sd": 1.0},
    "paired_mean": {"difference": 0.5, "sd_difference": 1.0},
    "two_proportions": {"p_control": 0.05, "p_treatment": 0.10, "continuity_correction": False},
    "anova_oneway": {"cohens_f": 0.25, "groups": 3},
    "correlation": {"r": 0.3, "r0": 0.0},
    # d = 0.5 between normal arms as P(Y > X) = Φ(d/√2)
    "rank_sum": {"prob_superiority": float(stats.norm.cdf(0.5 / math.sqrt(2)))},
    "survival_logrank": {
        "hazard_ratio": 0.75,
        "hazard_control": math.log(2) / MEDIAN_CONTROL,
        "median_control": MEDIAN_CONTROL,
        "accrual_period": 24.0,
        "follow_up": 12.0,
        "loss_rate": 0.0,
    },
}

# The effect field a find = "effect" question leaves out: the one the engine solves for.
UNKNOWN = {
    "two_means": "difference",
    "one_mean": "difference",
    "paired_mean": "difference",
    "two_proportions": "p_treatment",
    "anova_oneway": "cohens_f",
    "correlation": "r",
    "rank_sum": "prob_superiority",
    "survival_logrank": "hazard_ratio",
}

SIMULATION = {
    "replicates": 10000,
    "seed": 20261201,
    "test": None,
    "data": None,
    "decision_rule": "point",
    "chunk_size": 1000,
    "search_replicates": 2000,
}


def make_q(
    design: str,
    *,
    effect: dict | None = None,
    hypothesis: dict | None = None,
    adjustments: dict | None = None,
    simulation: dict | None = None,
    per_arm: Sequence[int] | None = None,
    **overrides,
) -> dict:
    """Return a normalized question for ``design``; top-level ``overrides`` are applied last.

    ``effect``, ``hypothesis``, ``adjustments`` and ``simulation`` are merged into the defaults;
    ``simulation`` (or ``method="simulation"``) makes a simulation question. ``per_arm`` sets the
    enrolled sizes and makes it a ``find = "power"`` question unless ``find`` says otherwise; a
    ``find = "effect"`` question leaves the solved-for field out of the default effect. A
    non-superiority hypothesis is one-sided unless ``sides`` is given.
    """
    find = overrides.pop("find", "sample_size" if per_arm is None else "power")
    method = overrides.pop("method", "analytic" if simulation is None else "simulation")
    defaults = dict(EFFECTS[design])
    if find == "effect":
        defaults.pop(UNKNOWN[design])
    q = {
        "design": design,
        "find": find,
        "alpha": 0.05,
        "sides": 2,
        "target_power": None if find == "power" else 0.80,
        "sample_size": None if per_arm is None else {"per_arm": list(per_arm)},
        "allocation_ratio": 1.0,
        "effect": {**defaults, **(effect or {})},
        "hypothesis": {
            "kind": "superiority",
            "margin": None,
            "higher_is_better": True,
            **(hypothesis or {}),
        },
        "adjustments": {"dropout": 0.0, "cluster": None, "comparisons": 1, **(adjustments or {})},
        "method": method,
        "formula": FORMULAS[design][0],  # NI/equivalence proportions: see below
        "simulation": None,
    }
    if q["hypothesis"]["kind"] != "superiority":
        q["sides"] = 1
        if design == "two_proportions":
            # pooled_z does not apply against a margin; the unpooled Wald form keeps the
            # Chow, Shao & Wang (2008) references of these tests.
            q["formula"] = "unpooled_z"
    if method == "simulation":
        sim = {**SIMULATION, **(simulation or {})}
        sim["test"] = sim["test"] or TESTS[design][0]
        q["simulation"] = sim
    q.update(overrides)
    return q


def answer(q: dict) -> tuple[list[float], list[int]]:
    """Return the raw and the rounded-up n per arm of an analytic question."""
    raw = get(q["design"]).solve_n(q, q["alpha"]).per_arm
    return raw, adjust.inflate(raw, q)[0]
