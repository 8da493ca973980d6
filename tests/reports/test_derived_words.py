"""The method note names every derived quantity in words: its cell's field label, else the one
table of derived quantities (``service/engine/designs/derived.py``), never its key with spaces
("non cases needed"). Checked on every example question and on the questions that reach the
derived keys no example does. Demo data: Northbridge, invented."""

from __future__ import annotations

import functools
import html
import json
import re
from pathlib import Path

import pytest

from service.engine import designs
from service.engine.designs.derived import DERIVED
from service.reports import describe
from service.reports.justification import method_note
from service.reports.render import render_report
from tests.posted import posted, record_of, simon_posted
from tests.reports.reports_testkit import REQUEST

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"

# Derived keys no example reaches: follow-up spread with accrual, a binary covariate's event
# rates, a slope's variance inflation, the rank-sum test's probability of superiority, and a
# posted two-stage design's characteristics (Simon 1989, Table 1, the minimax 4/18, 10/33).
MORE = {
    "count with accrual": {
        "outcome": "count",
        "layout": "two_groups",
        "effect": {"rate_ratio": 0.7},
        "assumptions": {
            "time_unit": "years",
            "control_rate": 0.8,
            "follow_up": 1.0,
            "accrual": 2.0,
            "overdispersion": 0.6,
        },
    },
    "binary covariate": {
        "outcome": "binary",
        "layout": "regression",
        "effect": {"odds_ratio": 1.5},
        "assumptions": {"reference_event_rate": 0.15, "covariate_prevalence": 0.3},
    },
    "slope": {
        "outcome": "continuous",
        "layout": "regression",
        "effect": {"slope": 0.5},
        "assumptions": {"sd_predictor": 2.0, "sd_residual": 10.0, "r2_covariates": 0.2},
    },
    "rank sum": {
        "outcome": "continuous",
        "layout": "two_groups",
        "analysis": "rank_sum",
        "effect": {"difference": -5.0},
        "assumptions": {"sd": 12.0},
    },
    "posted two-stage design": simon_posted(18, 4, 33, 10),
}


def _questions() -> dict[str, dict]:
    found = {
        path.name: json.loads(path.read_text(encoding="utf-8"))
        for path in sorted(EXAMPLES.glob("*.json"))
    }
    return {**found, **{name: posted(body) for name, body in MORE.items()}}


QUESTIONS = _questions()


@functools.cache
def _record(name: str) -> dict:
    return record_of(QUESTIONS[name])


def _label(q: dict, key: str) -> str:
    declared = {f.name for f in designs.get(q["outcome"], q["layout"]).fields}
    if key in declared:
        return describe.field_label(q, key)
    assert key in DERIVED, f"derived key {key!r} has no label in designs/derived.py"
    return DERIVED[key].label


def _visible(page: str) -> str:
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


@pytest.mark.parametrize("name", sorted(QUESTIONS))
def test_the_method_note_names_each_derived_quantity_in_words(name):
    record = _record(name)
    q, derived = record["question"], record["method"].get("derived") or {}
    shown = describe.derived_text(q, record)
    note, page = (
        method_note(record),
        _visible(render_report(REQUEST, record, curve_svg="<svg></svg>")),
    )
    if not derived:
        assert shown == "" and note == ""
        return
    # the justification's note and the page's method line print the same words
    assert shown in note and f"Derived from the entered values: {shown}." in page
    parts = shown.split("; ")
    assert len(parts) == len(derived), (name, shown)
    for key, part in zip(derived, parts, strict=True):
        label = _label(q, key)
        assert part.startswith(f"{label} "), (name, key, part)
        assert label != key.replace("_", " "), (name, key)  # words chosen, not the key's


def test_every_label_in_the_table_is_used():
    """No stale label: the questions above reach every key of the table."""
    reached = set()
    for name in QUESTIONS:
        reached |= set(_record(name)["method"].get("derived") or {})
    assert set(DERIVED) <= reached, sorted(set(DERIVED) - reached)


def test_a_derived_time_prints_with_the_question_time_unit():
    # formula: follow-up uniform on [f, f + accrual], mean f + accrual/2
    one = method_note(_record("northbridge_asthma_exacerbations.json"))  # follow-up 1, accrual 0
    assert "mean follow-up 1 year;" in one
    assert "mean follow-up 2 years;" in method_note(_record("count with accrual"))  # 1 + 2/2
