"""Normalized questions for the engine tests, with the schema's defaults (DEVELOPERS.md).

One builder for every engine test file, so that a change to the question contract is made here
once. What the engine knows (the solved field, the blocks, the defaults, the analyses) comes
from the cells' Design objects; only each cell's running example (the values a test uses when
it names none) is written here.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from scipy import stats

from service.engine import adjust
from service.engine.designs import get

CONTROL_MEDIAN = 12.0

# The running example of each cell, by field name (the Design says which block each is in).
EXAMPLES = {
    ("continuous", "two_groups"): {"difference": 0.5, "sd": 1.0},
    ("continuous", "single_group"): {"difference": 0.5, "sd": 1.0},
    ("continuous", "paired"): {"difference": 0.5, "sd_difference": 1.0},
    ("binary", "two_groups"): {"p_control": 0.05, "p_treatment": 0.10},
    ("continuous", "k_groups"): {"cohens_f": 0.25, "group_count": 3},
    ("association", "single_group"): {"r": 0.3},
    # d = 0.5 between normal groups as P(Y > X) = Φ(d/√2)
    ("ordinal", "two_groups"): {"prob_superiority": float(stats.norm.cdf(0.5 / math.sqrt(2)))},
    ("time_to_event", "two_groups"): {
        "hazard_ratio": 0.75,
        "time_unit": "months",
        "control_median": CONTROL_MEDIAN,
        "accrual": 24.0,
        "follow_up": 12.0,
    },
}

SIMULATION = {
    "replicates": 10000,
    "seed": 20261201,
    "data": None,
    "decision_rule": "point",
    "chunk_size": 1000,
    "search_replicates": 2000,
}


def _blocks(outcome: str, layout: str, find: str, posted: dict[str, dict]) -> dict[str, dict]:
    """The running example split into its blocks, with the posted blocks merged over it.

    A posted field of one form drops the example's fields of the other forms (posting
    sd_control + sd_treatment replaces the example's sd); find = effect drops the solved field.
    """
    design = get(outcome, layout)
    example = dict(EXAMPLES[(outcome, layout)])
    if find == "effect":
        example.pop(design.solved, None)
        for form in design.forms:  # an effect-block form (group means) cannot be posted then
            if any(design.field(n).block == "effect" for n in form):
                for n in form:
                    example.pop(n, None)
    common = set.intersection(*(set(f) for f in design.forms))
    given = {n for block in posted.values() for n in block} - common
    for form in design.forms:
        if given & set(form):
            for other in design.forms:
                for n in set(other) - set(form):
                    example.pop(n, None)
    if find != "effect" and given & {"group_means"}:
        example.pop(design.solved, None)
    blocks: dict[str, dict] = {"effect": {}, "assumptions": {}, "analysis_options": {}}
    for name, value in example.items():
        blocks[design.field(name).block][name] = value
    for block, values in posted.items():
        blocks[block].update(values)
    # The schema fills declared defaults into the normalized question.
    for f in design.fields:
        if f.default is not None and f.name not in blocks[f.block]:
            blocks[f.block][f.name] = f.default
    return blocks


def make_q(
    outcome: str,
    layout: str,
    *,
    effect: dict | None = None,
    assumptions: dict | None = None,
    analysis_options: dict | None = None,
    hypothesis: dict | None = None,
    adjustments: dict | None = None,
    simulation: dict | None = None,
    per_group: Sequence[int] | None = None,
    values: dict | None = None,
    **overrides,
) -> dict:
    """Return a normalized question of the cell; top-level ``overrides`` are applied last.

    ``effect``, ``assumptions``, ``analysis_options``, ``hypothesis``, ``adjustments`` and
    ``simulation`` are merged into the defaults; ``values`` holds field values by name, each
    placed in the block its cell declares (for tests parametrized over cells); ``simulation`` (or ``method="simulation"``)
    makes a simulation question. ``per_group`` sets the enrolled sizes and makes it a
    ``find = "power"`` question unless ``find`` says otherwise. A non-superiority hypothesis is
    one-sided unless ``alternative`` is given. The analysis is the cell's first that the method
    honors for the aim, unless ``analysis`` is given.
    """
    find = overrides.pop("find", "sample_size" if per_group is None else "power")
    method = overrides.pop("method", "analytic" if simulation is None else "simulation")
    hyp = {"aim": "superiority", "margin": None, "higher_is_better": True, **(hypothesis or {})}
    posted = {
        "effect": dict(effect or {}),
        "assumptions": dict(assumptions or {}),
        "analysis_options": dict(analysis_options or {}),
    }
    design = get(outcome, layout)
    for name, value in (values or {}).items():
        posted[design.field(name).block][name] = value
    q = {
        "outcome": outcome,
        "layout": layout,
        "analysis": (design.analyses_for(method, hyp["aim"]) or design.analyses_for(method))[0],
        "find": find,
        "alpha": 0.05,
        "alternative": "two-sided" if hyp["aim"] == "superiority" else "one-sided",
        "target_power": None if find == "power" else 0.80,
        "sample_size": None if per_group is None else {"per_group": list(per_group)},
        "allocation_ratio": 1.0,
        "allocation_rounding": "each_group",
        **_blocks(outcome, layout, find, posted),
        "hypothesis": hyp,
        "adjustments": {"dropout": 0.0, "cluster": None, "comparisons": 1, **(adjustments or {})},
        "method": method,
        "simulation": None,
    }
    if method == "simulation":
        q["simulation"] = {**SIMULATION, **(simulation or {})}
    q.update(overrides)
    return q


def answer(q: dict) -> tuple[list[float], list[int]]:
    """Return the raw and the rounded-up n per group of an analytic question."""
    raw = get(q["outcome"], q["layout"]).solve_n(q, q["alpha"]).per_group
    return raw, adjust.inflate(raw, q)[0]
