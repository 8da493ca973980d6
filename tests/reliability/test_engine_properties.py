"""Property tests: any valid question either yields a sealed record or a field-naming error.

Questions are generated from strategies over each design's fields and the ranges the schema
allows (analytic for every find, small simulations for power). Each goes through
``load_question`` and ``service.engine.compute``. The outcome must be a record whose hash
verifies, with sample sizes of at least 2 and a power in [0, 1]; or a ``QuestionInvalid`` /
``QuestionError`` naming a field, or another ``EngineError`` with a message. Any other
exception type is a defect. The checks are invariants of the contract (DEVELOPERS.md, "The
result record"), common practice, no source.
"""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.engine import EngineError, QuestionError, compute
from service.engine.records import verify
from service.schemas import QuestionInvalid
from service.schemas.question import load_question

DESIGNS = (
    "two_means",
    "one_mean",
    "paired_mean",
    "two_proportions",
    "anova_oneway",
    "correlation",
    "rank_sum",
    "survival_logrank",
)
ONE_ARM = ("one_mean", "paired_mean", "correlation")


def _floats(low: float, high: float):
    return st.floats(low, high, allow_nan=False, allow_infinity=False)


def _effect(design: str):
    if design in ("two_means", "one_mean"):
        return st.fixed_dictionaries({"difference": _floats(0.1, 2.0), "sd": _floats(0.5, 3.0)})
    if design == "paired_mean":
        return st.one_of(
            st.fixed_dictionaries(
                {"difference": _floats(0.1, 2.0), "sd_difference": _floats(0.5, 3.0)}
            ),
            st.fixed_dictionaries(
                {
                    "difference": _floats(0.1, 2.0),
                    "sd": _floats(0.5, 3.0),
                    "correlation": _floats(0.0, 0.9),
                }
            ),
        )
    if design == "two_proportions":
        return st.tuples(_floats(0.05, 0.6), _floats(0.05, 0.3), st.booleans()).map(
            lambda t: {"p_control": t[0], "p_treatment": t[0] + t[1], "continuity_correction": t[2]}
        )
    if design == "anova_oneway":
        return st.fixed_dictionaries({"cohens_f": _floats(0.1, 0.6), "groups": st.integers(2, 5)})
    if design == "correlation":
        return st.fixed_dictionaries({"r": _floats(0.1, 0.6)})
    if design == "rank_sum":
        return st.fixed_dictionaries({"prob_superiority": _floats(0.55, 0.8)})
    return st.fixed_dictionaries(
        {
            "hazard_ratio": _floats(0.4, 0.85),
            "control_median": _floats(6.0, 36.0),
            "accrual": _floats(6.0, 24.0),
            "follow_up": _floats(0.0, 24.0),
        }
    )


def _arms(design: str, effect: dict) -> int:
    if design == "anova_oneway":
        return int(effect["groups"])
    return 1 if design in ONE_ARM else 2


def _simulation(design: str, draw) -> dict:
    simulation = {
        "replicates": draw(st.integers(200, 400)),
        "chunk_size": draw(st.integers(100, 200)),
        "seed": draw(st.integers(0, 2**53 - 1)),
    }
    if design == "rank_sum":  # rank_sum simulates from a data model only
        shift = draw(_floats(0.1, 0.8))
        simulation["data"] = {
            "control": {"family": "lognormal", "mu": 1.0, "sigma": 0.8},
            "treatment": {"family": "lognormal", "mu": 1.0 + shift, "sigma": 0.8},
        }
    return simulation


@st.composite
def questions(draw) -> dict:
    """A posted question within the documented ranges of its design."""
    design = draw(st.sampled_from(DESIGNS))
    effect = draw(_effect(design))
    find = draw(st.sampled_from(["sample_size", "power"]))
    question: dict = {
        "design": design,
        "find": find,
        "alpha": draw(st.sampled_from([0.01, 0.025, 0.05, 0.1])),
        "effect": effect,
        "adjustments": {"dropout": draw(_floats(0.0, 0.3))},
    }
    if _arms(design, effect) == 2 and draw(st.booleans()):
        question["allocation_ratio"] = draw(st.sampled_from([0.5, 1.0, 1.5, 2.0]))
    if find == "sample_size":
        question["target_power"] = draw(_floats(0.6, 0.95))
    else:
        size = draw(st.integers(4, 200))
        question["sample_size"] = {"per_group": [size] * _arms(design, effect)}
        if draw(st.integers(0, 3)) == 0:
            question["method"] = "simulation"
            question["simulation"] = _simulation(design, draw)
    return question


@settings(
    max_examples=100,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow],
)
@given(raw=questions())
def test_valid_questions_give_a_sealed_record_or_a_field_error(raw):
    try:
        question = load_question(raw)
    except QuestionInvalid as exc:
        assert exc.errors and all(key and messages for key, messages in exc.errors.items())
        return
    try:
        record = compute(question)
    except QuestionError as exc:
        assert exc.field and exc.message, exc
        return
    except EngineError as exc:
        assert str(exc), type(exc).__name__
        return
    assert verify(record)
    per_group = record["sample_size"]["per_group"]
    assert len(per_group) >= 1 and all(isinstance(n, int) and n >= 2 for n in per_group), per_group
    assert record["sample_size"]["total"] == sum(per_group)
    power = record["power"]["estimate"]
    assert 0.0 <= power <= 1.0, power
    if question["method"] == "simulation":
        assert record["power"]["replicates"] == question["simulation"]["replicates"]


@pytest.mark.parametrize("design", DESIGNS)
def test_each_design_has_a_strategy_that_loads(design):
    # Guards the generator: a strategy that never passes the schema would test nothing.
    @settings(max_examples=5, deadline=None, derandomize=True, database=None)
    @given(effect=_effect(design))
    def check(effect):
        load_question({"design": design, "find": "sample_size", "effect": effect})

    check()
