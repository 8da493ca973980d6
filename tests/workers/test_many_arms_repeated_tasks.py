"""The treatments-against-control and repeated-measures cells through the worker's task body:
a simulated request, chunks in shuffled order, gives the in-process record."""

from __future__ import annotations

import random

import pytest
from sqlalchemy import select
from workers_testkit import insert_request

from service.engine import canonical_json, compute
from service.schemas import load_question
from service.store.db import session_scope
from service.store.models import Result
from workers import tasks

QUESTIONS = {
    "treatments_vs_control": {
        "outcome": "continuous",
        "layout": "treatments_vs_control",
        "analysis": "hochberg",
        "find": "power",
        "effect": {"difference": 1.0},
        "assumptions": {"sd": 2.0, "treatment_count": 3},
        "analysis_options": {"power_goal": "all_treatments"},
        "sample_size": {"per_group": [40, 40, 40, 40]},
        "method": "simulation",
        "simulation": {"replicates": 2000, "seed": 31, "chunk_size": 500},
    },
    "binary_treatments_vs_control": {
        "outcome": "binary",
        "layout": "treatments_vs_control",
        "analysis": "holm",
        "find": "power",
        "effect": {"p_treatment": 0.55},
        "assumptions": {"p_control": 0.4, "treatment_count": 3},
        "sample_size": {"per_group": [100, 100, 100, 100]},
        "method": "simulation",
        "simulation": {"replicates": 2000, "seed": 31, "chunk_size": 500},
    },
    "repeated_measures": {
        "outcome": "continuous",
        "layout": "repeated_measures",
        "analysis": "slope",
        "find": "power",
        "effect": {"difference": 0.25},
        "assumptions": {"sd": 2.0, "correlation": 0.4, "visit_count": 5, "retention": 0.9},
        "sample_size": {"per_group": [50, 50]},
        "method": "simulation",
        "simulation": {"replicates": 2000, "seed": 31, "chunk_size": 500},
    },
}


@pytest.mark.parametrize("layout", sorted(QUESTIONS))
def test_simulated_request_through_the_task_body(layout, sqlite_config, factory):
    question = load_question(QUESTIONS[layout])
    expected = compute(question)
    request_id = insert_request(factory, question)
    rng = random.Random(5)

    def order(indices: list[int]) -> list[int]:
        rng.shuffle(indices)
        return indices

    assert tasks.run_request_job(request_id, sqlite_config, order=order) == "computed"
    with session_scope(factory) as session:
        [result] = list(session.scalars(select(Result).where(Result.request_id == request_id)))
        record = result.record
    assert canonical_json(record) == canonical_json(expected)
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")
