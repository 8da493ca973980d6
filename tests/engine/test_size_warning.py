"""An implausibly large sample-size answer is flagged in the record's warnings.

The threshold (100,000 in total) is common practice, no source. The questions are the shipped
example, read by file name, with its effect shrunk.
"""

from __future__ import annotations

import json
from pathlib import Path

from service.engine import compute
from service.engine.records import IMPLAUSIBLE_TOTAL, size_warnings
from service.schemas import load_question

EXAMPLE = Path(__file__).resolve().parents[2] / "service" / "examples" / "northbridge_bp_trial.json"


def _answer(difference: float | None = None) -> dict:
    question = json.loads(EXAMPLE.read_text())
    if difference is not None:
        question["effect"]["difference"] = difference
    return compute(load_question(question))


def test_a_tiny_effect_gets_a_warning_naming_the_total():
    record = _answer(-0.005)  # a 0.005 mmHg difference: millions per group
    total = record["sample_size"]["total"]
    assert total > 10_000_000
    flagged = [w for w in record["warnings"] if "beyond what almost any study enrolls" in w]
    assert flagged == [
        f"the answer, {total:,} participants in total, is more than {IMPLAUSIBLE_TOTAL:,}, "
        "beyond what almost any study enrolls: check the effect (and its units), the "
        "variability and the other assumptions before relying on it"
    ]


def test_an_ordinary_answer_gets_none():
    record = _answer()
    assert record["sample_size"]["total"] < 1_000
    assert not any("beyond what almost any study" in w for w in record["warnings"])


def test_the_threshold_is_inclusive_and_applies_to_sample_size_answers_only():
    def record(find: str, total: int) -> dict:
        return {"question": {"find": find}, "sample_size": {"total": total}}

    assert size_warnings(record("sample_size", IMPLAUSIBLE_TOTAL)) == []
    assert len(size_warnings(record("sample_size", IMPLAUSIBLE_TOTAL + 1))) == 1
    assert size_warnings(record("power", 10 * IMPLAUSIBLE_TOTAL)) == []
    assert size_warnings({"question": {"find": "sample_size"}, "sample_size": None}) == []
