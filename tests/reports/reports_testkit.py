"""Helpers for the report tests: the normalized-question builder and invented demo inputs."""

import copy

from service.engine.designs import TESTS

_BASE = {
    "find": "sample_size",
    "alpha": 0.05,
    "sides": 2,
    "target_power": 0.8,
    "sample_size": None,
    "allocation_ratio": 1.0,
    "hypothesis": {"kind": "superiority", "margin": None, "higher_is_better": True},
    "adjustments": {"dropout": 0.0, "cluster": None, "comparisons": 1},
    "method": "analytic",
    "simulation": None,
}

_DEFAULT_FORMULA = {
    "two_means": "student",
    "paired_mean": "noncentral_t",
    "one_mean": "noncentral_t",
    "two_proportions": "pooled_z",
    "anova_oneway": "noncentral_f",
    "correlation": "fisher_z",
    "rank_sum": "noether",
    "survival_logrank": "schoenfeld",
}


def build_question(design: str, effect: dict, **overrides) -> dict:
    """A normalized question with the schema's defaults; nested dicts in overrides are merged."""
    q = copy.deepcopy(_BASE)
    q.update(design=design, effect=dict(effect), formula=_DEFAULT_FORMULA[design])
    for key, value in overrides.items():
        if isinstance(value, dict) and isinstance(q.get(key), dict):
            q[key] = {**q[key], **value}
        else:
            q[key] = value
    if q["method"] == "simulation":
        sim = {"replicates": 10000, "seed": 20261201, "test": None, "data": None,
               "decision_rule": "point", "chunk_size": 1000, "search_replicates": 2000}
        sim.update(q.get("simulation") or {})
        sim["test"] = sim["test"] or TESTS[design][0]
        q["simulation"] = sim
    return q


D_HALF = {"difference": 0.5, "sd_control": 1.0, "sd_treatment": 1.0}
# Control median 12 months -> hazard ln 2 / 12; accrual 24, extra follow-up 12 (REFERENCES.md).
SURVIVAL = {"hazard_ratio": 0.75, "hazard_control": 0.6931471805599453 / 12, "accrual_period": 24.0,
            "follow_up": 12.0, "loss_rate": 0.0}

# Invented demo request (Northbridge General Hospital research office); not real data.
REQUEST = {
    "id": "5f0c2d9e8a7b4c1d9e0f1a2b3c4d5e6f",
    "status": "computed",
    "protocol": {"id": "NGH-2025-014", "title": "Home blood-pressure coaching after discharge",
                 "version": "1.2", "principal_investigator": "Dr. A. Okafor"},
    "requester": {"name": "Maya Lindqvist", "email": "m.lindqvist@northbridge.example",
                  "department": "Cardiology research office"},
    "deadline": "2025-03-31",
    "context": {"effect_source": "the Northbridge pilot study of 2023"},
}
