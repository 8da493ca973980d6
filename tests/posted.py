"""Posted (raw) questions shared by the engine, report and schema tests.

Each constant is a question as an investigator posts it; ``posted(base, **over)`` gives a fresh
copy with changes, so a test may edit its body without touching another test's. The normalized
questions of the engine's own tests are in ``tests/engine/questions.py``. Demo values only.
"""

from __future__ import annotations

import copy

from service.engine import compute
from service.schemas import load_question

__all__ = [
    "ACCURACY",
    "PAIRED",
    "SIMON",
    "SINGLE_RATE",
    "SURV",
    "posted",
    "record_of",
    "simon_posted",
]

# Log-rank with a control median of 12 months, accrual 24 and 12 more of follow-up
# (Lachin & Foulkes 1986).
SURV = {
    "outcome": "time_to_event",
    "layout": "two_groups",
    "effect": {"hazard_ratio": 0.75},
    "assumptions": {
        "time_unit": "months",
        "control_median": 12.0,
        "accrual": 24.0,
        "follow_up": 12.0,
    },
}

# One group against a reference rate, one-sided: the smoking-cessation example's 0.35 against 0.2.
SINGLE_RATE = {
    "outcome": "binary",
    "layout": "single_group",
    "find": "sample_size",
    "alternative": "one-sided",
    "alpha": 0.05,
    "target_power": 0.8,
    "effect": {"p": 0.35},
    "assumptions": {"p_null": 0.2},
}

# Paired binary outcome by its discordant pairs (McNemar).
PAIRED = {
    "outcome": "binary",
    "layout": "paired",
    "find": "sample_size",
    "alpha": 0.05,
    "target_power": 0.9,
    "effect": {"p_treatment_only": 0.15},
    "assumptions": {"p_control_only": 0.05},
}

# Sensitivity and specificity to ±0.05 (Buderer 1996): the chest-pain rule example's values.
ACCURACY = {
    "outcome": "diagnostic",
    "layout": "single_group",
    "find": "sample_size",
    "hypothesis": {"aim": "estimation", "half_width": 0.05},
    "effect": {"sensitivity": 0.9, "specificity": 0.8},
    "assumptions": {"prevalence": 0.2},
}

# Simon's two-stage phase II question of Simon (1989), Table 1: p0 .20, p1 .40, alpha .05,
# power .80 (optimal design 3/13, 12/43; minimax 4/18, 10/33).
SIMON = {
    "outcome": "binary",
    "layout": "two_stage",
    "find": "sample_size",
    "alpha": 0.05,
    "target_power": 0.8,
    "effect": {"p": 0.4},
    "assumptions": {"p_null": 0.2},
}


def posted(base: dict, **over) -> dict:
    """A fresh copy of ``base`` with ``over`` set; find = power posts no target power."""
    body = copy.deepcopy(base)
    body.update(over)
    if body.get("find") == "power":
        body.pop("target_power", None)
    return body


def simon_posted(n1: int, r1: int, n: int, r: int, **over) -> dict:
    """The ``SIMON`` question asking the power of a given design: r1/n1 at stage 1, r/n in all."""
    body = posted(SIMON, find="power", sample_size={"per_group": [n]}, **over)
    body["analysis_options"] = {
        "stage1_size": n1,
        "stage1_max_responses": r1,
        "max_responses": r,
    }
    return body


def record_of(body: dict) -> dict:
    """The engine's record for a posted question, through the public normalizer."""
    return compute(load_question(body))
