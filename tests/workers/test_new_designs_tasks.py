"""The worker path for the survival extensions and assurance: one request each through the task."""

from __future__ import annotations

import json
from pathlib import Path

from sqlalchemy import select
from workers_testkit import insert_request

from service.engine import compute
from service.schemas import load_question
from service.store.db import session_scope
from service.store.models import Result
from workers import tasks

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"


def _record(factory, request_id: str) -> dict:
    with session_scope(factory) as session:
        [row] = session.scalars(select(Result).where(Result.request_id == request_id))
        return row.record


def test_delayed_effect_simulation_through_the_worker(sqlite_config, factory):
    raw = json.loads((EXAMPLES / "northbridge_immunotherapy_delayed_effect.json").read_text())
    raw.pop("target_power")
    raw.update(
        find="power",
        sample_size={"per_group": [120, 120]},
        method="simulation",
        simulation={"replicates": 400, "seed": 31},
    )
    question = load_question(raw)
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    record = _record(factory, request_id)
    # the worker's record is the in-process one (same seed, same chunks)
    assert record["power"] == compute(question)["power"]


def test_assurance_through_the_worker(sqlite_config, factory):
    question = load_question(
        json.loads((EXAMPLES / "northbridge_bp_trial_assurance.json").read_text())
    )
    request_id = insert_request(factory, question)
    assert tasks.run_request_job(request_id, sqlite_config) == "computed"
    record = _record(factory, request_id)
    assert record["assurance"] == compute(question)["assurance"]
    assert record["assurance"]["estimate"] < record["power"]["estimate"]
