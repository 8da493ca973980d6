"""Property tests: any valid question either yields a sealed record or a field-naming error.

Questions are generated from strategies over each cell's fields and the ranges the schema
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

from service.engine import EngineError, QuestionError, compute, designs
from service.engine.records import verify
from service.schemas import QuestionInvalid
from service.schemas.question import load_question


def _floats(low: float, high: float):
    return st.floats(low, high, allow_nan=False, allow_infinity=False)


def _mean_difference(sd_name: str):
    return st.fixed_dictionaries({"difference": _floats(0.1, 2.0), sd_name: _floats(0.5, 3.0)})


# Field values per cell, within the ranges the schema allows (the blocks come from the cells).
VALUES = {
    ("continuous", "two_groups"): _mean_difference("sd"),
    ("continuous", "single_group"): _mean_difference("sd"),
    ("continuous", "paired"): st.one_of(
        _mean_difference("sd_difference"),
        st.fixed_dictionaries(
            {
                "difference": _floats(0.1, 2.0),
                "sd": _floats(0.5, 3.0),
                "correlation": _floats(0.0, 0.9),
            }
        ),
    ),
    ("binary", "two_groups"): st.tuples(_floats(0.05, 0.6), _floats(0.05, 0.3), st.booleans()).map(
        lambda t: {"p_control": t[0], "p_treatment": t[0] + t[1], "continuity_correction": t[2]}
    ),
    ("continuous", "k_groups"): st.fixed_dictionaries(
        {"cohens_f": _floats(0.1, 0.6), "group_count": st.integers(2, 5)}
    ),
    ("association", "single_group"): st.fixed_dictionaries({"r": _floats(0.1, 0.6)}),
    ("ordinal", "two_groups"): st.fixed_dictionaries({"prob_superiority": _floats(0.55, 0.8)}),
    ("time_to_event", "two_groups"): st.fixed_dictionaries(
        {
            "hazard_ratio": _floats(0.4, 0.85),
            "time_unit": st.sampled_from(["weeks", "months"]),
            "control_median": _floats(6.0, 36.0),
            "accrual": _floats(6.0, 24.0),
            "follow_up": _floats(0.0, 24.0),
        }
    ),
    ("continuous", "treatments_vs_control"): st.fixed_dictionaries(
        {
            "difference": _floats(0.1, 2.0),
            "sd": _floats(0.5, 3.0),
            "treatment_count": st.integers(1, 4),
            "power_goal": st.sampled_from(["any_treatment", "all_treatments"]),
            "control_allocation": st.sampled_from(["equal", "square_root"]),
        }
    ),
    ("binary", "treatments_vs_control"): st.fixed_dictionaries(
        {
            "p_control": _floats(0.1, 0.5),
            "p_treatment": _floats(0.55, 0.9),
            "treatment_count": st.integers(1, 4),
            "power_goal": st.sampled_from(["any_treatment", "all_treatments"]),
            "control_allocation": st.sampled_from(["equal", "square_root"]),
        }
    ),
    ("continuous", "repeated_measures"): st.fixed_dictionaries(
        {
            "difference": _floats(0.1, 2.0),
            "sd": _floats(0.5, 3.0),
            "correlation": _floats(0.0, 0.9),
            "visit_count": st.integers(2, 6),
            "correlation_structure": st.sampled_from(["compound_symmetry", "ar1"]),
            "retention": _floats(0.5, 1.0),
        }
    ),
    ("continuous", "crossover"): st.fixed_dictionaries(
        {
            "difference": _floats(0.1, 2.0),
            "sd_within": _floats(0.5, 3.0),
            "sd_between": _floats(0.0, 3.0),
            "period_effect": _floats(-1.0, 1.0),
        }
    ),
    ("lognormal", "crossover"): st.fixed_dictionaries(
        {"ratio": _floats(1.05, 2.0), "cv": _floats(0.05, 0.8)}
    ),
    ("lognormal", "two_groups"): st.fixed_dictionaries(
        {"ratio": _floats(0.5, 0.95), "cv": _floats(0.05, 1.0)}
    ),
    ("count", "two_groups"): st.fixed_dictionaries(
        {
            "rate_ratio": _floats(0.4, 0.85),
            "time_unit": st.sampled_from(["months", "years"]),
            "control_rate": _floats(0.2, 3.0),
            "follow_up": _floats(0.5, 2.0),
            "accrual": _floats(0.0, 1.0),
            "overdispersion": _floats(0.0, 1.5),
        }
    ),
    ("continuous", "regression"): st.fixed_dictionaries(
        {
            "f_squared": _floats(0.02, 0.5),
            "tested_predictors": st.integers(1, 3),
            "other_predictors": st.integers(0, 4),
        }
    ),
    ("binary", "regression"): st.fixed_dictionaries(
        {
            "odds_ratio": _floats(1.2, 3.0),
            "event_rate": _floats(0.05, 0.5),
            "r2_covariates": _floats(0.0, 0.5),
        }
    ),
    ("time_to_event", "regression"): st.fixed_dictionaries(
        {
            "hazard_ratio": _floats(0.5, 0.85),
            "sd_covariate": _floats(0.5, 2.0),
            "event_probability": _floats(0.1, 0.9),
        }
    ),
    ("diagnostic", "two_groups"): st.fixed_dictionaries({"auc": _floats(0.6, 0.9)}),
    # a precision question only: the hypothesis goes to the question's top level
    ("diagnostic", "single_group"): st.fixed_dictionaries(
        {
            "sensitivity": _floats(0.6, 0.95),
            "specificity": _floats(0.6, 0.95),
            "prevalence": _floats(0.05, 0.5),
            "hypothesis": st.fixed_dictionaries(
                {"aim": st.just("estimation"), "half_width": _floats(0.03, 0.15)}
            ),
        }
    ),
    ("binary", "single_group"): st.tuples(_floats(0.05, 0.6), _floats(0.1, 0.35)).map(
        lambda t: {"p_null": t[0], "p": t[0] + t[1]}
    ),
    # Simon's designs are searched by enumeration (cost ~ n⁴): differences of 0.2 or more
    ("binary", "two_stage"): st.tuples(_floats(0.05, 0.5), _floats(0.2, 0.35)).map(
        lambda t: {"p_null": t[0], "p": t[0] + t[1]}
    ),
    ("binary", "paired"): st.one_of(
        st.tuples(_floats(0.02, 0.3), _floats(0.03, 0.3)).map(
            lambda t: {"p_control_only": t[0], "p_treatment_only": t[0] + t[1]}
        ),
        st.tuples(_floats(0.1, 0.6), _floats(0.05, 0.3), _floats(0.0, 0.5)).map(
            lambda t: {"p_control": t[0], "p_treatment": t[0] + t[1], "correlation": t[2]}
        ),
    ),
}
CELLS = sorted(VALUES)


def _blocks(cell: tuple, values: dict) -> dict:
    """The values placed in the blocks their cell declares."""
    design = designs.get(*cell)
    out: dict = {}
    for name, value in values.items():
        if name == "hypothesis":
            out[name] = value
            continue
        out.setdefault(design.field(name).block, {})[name] = value
    return out


def _groups(cell: tuple, values: dict) -> int:
    return int(values.get("group_count") or designs.get(*cell).groups(_blocks(cell, values)))


def _simulation(cell: tuple, draw) -> dict:
    simulation = {
        "replicates": draw(st.integers(200, 400)),
        "chunk_size": draw(st.integers(100, 200)),
        "seed": draw(st.integers(0, 2**53 - 1)),
    }
    if cell == ("ordinal", "two_groups"):  # simulated here from a skewed data model
        shift = draw(_floats(0.1, 0.8))
        simulation["data"] = {
            "control": {"family": "lognormal", "mu": 1.0, "sigma": 0.8},
            "treatment": {"family": "lognormal", "mu": 1.0 + shift, "sigma": 0.8},
        }
    return simulation


@st.composite
def questions(draw) -> dict:
    """A posted question within the documented ranges of its cell."""
    cell = draw(st.sampled_from(CELLS))
    values = draw(VALUES[cell])
    find = draw(st.sampled_from(["sample_size", "power"]))
    question: dict = {
        "outcome": cell[0],
        "layout": cell[1],
        "find": find,
        "alpha": draw(st.sampled_from([0.01, 0.025, 0.05, 0.1])),
        **_blocks(cell, values),
        "adjustments": {"dropout": draw(_floats(0.0, 0.3))},
    }
    groups = _groups(cell, values)
    if groups == 2 and cell != ("continuous", "k_groups") and draw(st.booleans()):
        question["allocation_ratio"] = draw(st.sampled_from([0.5, 1.0, 1.5, 2.0]))
    if find == "sample_size":
        question["target_power"] = draw(_floats(0.6, 0.95))
    else:
        size = draw(st.integers(4, 200))
        question["sample_size"] = {"per_group": [size] * groups}
        if draw(st.integers(0, 3)) == 0:
            question["method"] = "simulation"
            question["simulation"] = _simulation(cell, draw)
    if "hypothesis" in question:  # a precision question: a confidence, not alpha and power
        for name in ("alpha", "target_power", "method", "simulation"):
            question.pop(name, None)
        if find == "power":
            question.update(find="precision", hypothesis={"aim": "estimation"})
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
    if question["hypothesis"]["aim"] == "estimation":  # a precision question: no power
        assert record["power"] is None and record["precision"]["half_width_expected"] > 0
        return
    power = record["power"]["estimate"]
    assert 0.0 <= power <= 1.0, power
    if question["method"] == "simulation":
        assert record["power"]["replicates"] == question["simulation"]["replicates"]


def test_every_registered_cell_has_a_strategy():
    assert {(d.outcome, d.layout) for d in designs.all()} == set(VALUES)


@pytest.mark.parametrize("cell", CELLS)
def test_each_cell_has_a_strategy_that_loads(cell):
    # Guards the generator: a strategy that never passes the schema would test nothing.
    @settings(max_examples=5, deadline=None, derandomize=True, database=None)
    @given(values=VALUES[cell])
    def check(values):
        load_question(
            {"outcome": cell[0], "layout": cell[1], "find": "sample_size", **_blocks(cell, values)}
        )

    check()
