"""Simulated crossover, bioequivalence and ANCOVA requests through the worker's task body
(SQLite): the stored record is the engine's record for the same question and seed."""

from __future__ import annotations

import math

import pytest
from sqlalchemy import select
from workers_testkit import insert_request

from service.engine import compute
from service.schemas import load_question
from service.store.db import session_scope
from service.store.models import Result
from workers import tasks

SIM = {"replicates": 1000, "seed": 20261202}
QUESTIONS = {
    "crossover": {
        "outcome": "continuous",
        "layout": "crossover",
        "find": "power",
        "effect": {"difference": 0.6},
        "assumptions": {"sd_within": 1.0, "sd_between": 1.5, "period_effect": 0.3},
        "sample_size": {"per_group": [12, 12]},
    },
    "bioequivalence": {
        "outcome": "lognormal",
        "layout": "crossover",
        "find": "power",
        "alpha": 0.05,
        "alternative": "one-sided",
        "effect": {"ratio": 0.95},
        "assumptions": {"cv": 0.25},
        "hypothesis": {"aim": "equivalence", "margin": math.log(1.25)},
        "sample_size": {"per_group": [14, 14]},
    },
    "proportional_odds": {
        "outcome": "ordinal",
        "layout": "two_groups",
        "find": "power",
        "effect": {"odds_ratio": 1.8},
        "assumptions": {"category_probs": [0.2, 0.3, 0.3, 0.2]},
        "sample_size": {"per_group": [60, 60]},
    },
    "ancova": {
        "outcome": "continuous",
        "layout": "two_groups",
        "analysis": "ancova",
        "find": "power",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0, "baseline_correlation": 0.5},
        "sample_size": {"per_group": [30, 30]},
    },
}


@pytest.mark.parametrize("name", sorted(QUESTIONS))
def test_a_simulated_request_of_a_new_design_is_computed_by_the_worker(
    sqlite_config, factory, name
):
    question = load_question({**QUESTIONS[name], "method": "simulation", "simulation": SIM})
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    with session_scope(factory) as session:
        [result] = session.scalars(select(Result).where(Result.request_id == request_id))
        record = result.record
    expected = compute(question)
    assert record["power"] == expected["power"]
    assert (
        record["reproducibility"]["record_sha256"] == expected["reproducibility"]["record_sha256"]
    )


def test_a_simulated_ratio_scale_request_is_computed_by_the_worker(sqlite_config, factory):
    question = load_question(
        {
            "outcome": "binary",
            "layout": "two_groups",
            "find": "power",
            "analysis": "mn_score",
            "alternative": "one-sided",
            "effect": {"p_treatment": 0.85},
            "assumptions": {"p_control": 0.85},
            "analysis_options": {"scale": "risk_ratio"},
            "hypothesis": {"aim": "noninferiority", "margin": math.log(0.9)},
            "sample_size": {"per_group": [150, 150]},
            "method": "simulation",
            "simulation": SIM,
        }
    )
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    with session_scope(factory) as session:
        [result] = session.scalars(select(Result).where(Result.request_id == request_id))
        record = result.record
    expected = compute(question)
    assert record["power"] == expected["power"]
    assert record["method"]["analysis"] == "mn_score"
