"""Schema instances are shared by every request of a process (service.schemas.shared).

Sharing is only safe while loading keeps no state on the instance. The reference here is the
schema itself, used the way it was before sharing: a fresh instance per load, one at a time.
Loads of every example question (and broken copies of them) from many threads at once through
the shared instances must give exactly the same results and the same field-named errors.
"""

from __future__ import annotations

import copy
import json
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

from marshmallow import ValidationError

from service.engine import designs
from service.schemas.blocks import simulation_schema
from service.schemas.errors import QuestionInvalid
from service.schemas.question import QuestionSchema, flatten_errors, load_question
from service.schemas.shared import shared

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"


def _questions() -> list[dict]:
    found = []
    for path in sorted(EXAMPLES.glob("*.json")):
        question = json.loads(path.read_text())
        found.append(question)
        broken = copy.deepcopy(question)
        broken["alpha"] = 1.5  # outside (0, 1): an error naming the field
        found.append(broken)
        other = copy.deepcopy(question)
        other["layout"] = "no_such_layout"
        found.append(other)
    return found


def _fresh(question: dict):
    try:
        return ("ok", QuestionSchema().load(copy.deepcopy(question)))
    except ValidationError as exc:
        return ("invalid", flatten_errors(exc.messages))


def _through_shared(question: dict):
    try:
        return ("ok", load_question(copy.deepcopy(question)))
    except QuestionInvalid as exc:
        return ("invalid", exc.errors)


def test_one_instance_per_class_and_options():
    assert shared(QuestionSchema) is shared(QuestionSchema)
    means = designs.get("continuous", "two_groups")
    ranks = designs.get("ordinal", "two_groups")
    assert simulation_schema(means) is simulation_schema(means)
    assert simulation_schema(means) is not simulation_schema(ranks)


def test_concurrent_loads_through_shared_instances_match_fresh_sequential_loads():
    questions = _questions() * 6
    expected = [_fresh(q) for q in questions]
    with ThreadPoolExecutor(max_workers=8) as pool:
        got = list(pool.map(_through_shared, questions))
    assert len(got) == len(expected) > 30
    assert got == expected
    assert {kind for kind, _ in got} == {"ok", "invalid"}


def test_each_load_returns_its_own_question_and_defaults():
    # Defaults are loaded once per process (shared.defaults) and the checks' normalized question
    # is handed to the post-load step: neither may let one answer's changes reach the next.
    raw = _questions()[0]
    first = load_question(copy.deepcopy(raw))
    expected = copy.deepcopy(first)
    first["hypothesis"]["aim"] = "changed"
    first["adjustments"]["dropout"] = 0.5
    first["effect"].clear()
    assert load_question(copy.deepcopy(raw)) == expected
