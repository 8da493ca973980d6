"""The report's words for interim analyses: the sentence and the boundaries table."""

from __future__ import annotations

import json
from importlib import resources

from service.engine import compute
from service.reports.interim import table
from service.reports.justification import justification
from service.schemas import load_question


def _example(name: str) -> dict:
    return json.loads(resources.files("service.examples").joinpath(name).read_text("utf-8"))


def test_justification_states_looks_spending_inflation_and_expected_size():
    record = compute(load_question(_example("northbridge_bp_interim.json")))
    text = justification(record)
    assert "analyzed 3 times (2 interim analyses and a final one)" in text
    assert "O'Brien-Fleming-type alpha-spending function (Lan & DeMets 1983)" in text
    assert "inflation factor 1.0119" in text
    assert "expected number of subjects is 221 (275 if there is no effect)" in text
    view = table(record)
    assert [row["efficacy"] for row in view["rows"]] == ["±3.710", "±2.511", "±1.993"]
    assert view["size_heading"] == "Analyzed per group" and not view["futility"]


def test_time_to_event_words_count_events_and_futility():
    body = _example("northbridge_heart_failure_survival.json")
    body.update(
        alternative="one-sided",
        alpha=0.025,
        interim={"looks": 3, "futility_spending": "pocock"},
    )
    record = compute(load_question(body))
    text = justification(record)
    fixed = record["events"]["fixed_required"]
    assert f"a single final analysis would need {fixed} events" in text
    assert "non-binding" in text and "expected number of events" in text
    view = table(record)
    assert view["size_heading"] == "Events" and view["futility"]
    assert view["rows"][-1]["size"] == str(record["events"]["required"])
    assert record["question"]["interim"]["futility_spending"] == "pocock"


def test_simulated_sequential_test_says_it_was_simulated():
    body = _example("northbridge_bp_interim.json")
    body.update(method="simulation", simulation={"replicates": 2000, "seed": 8})
    body.pop("adjustments")
    body.update(find="power", target_power=None, sample_size={"per_group": [124, 124]})
    record = compute(load_question(body))
    text = justification(record)
    assert "The sequential test was simulated (2,000 replicates of each data model)" in text
    block = record["sequential"]
    expected = round(block["expected_total_alternative"])
    assert f"expected number of subjects is {expected:,}" in text
    view = table(record)
    assert [row["efficacy"] for row in view["rows"]] == ["±3.710", "±2.511", "±1.993"]
