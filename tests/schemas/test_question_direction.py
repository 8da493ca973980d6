"""A one-sided superiority question looks where its effect points; a posted higher_is_better
that says otherwise is refused on that field (DEVELOPERS.md, "The question": one-sided tests)."""

from __future__ import annotations

import pytest

from service.schemas import QuestionInvalid, load_question
from tests.posted import SURV

# One question per cell with a one-sided option, its assumed effect pointing *lower*.
LOWER = [
    {
        "outcome": "continuous",
        "layout": "two_groups",
        "effect": {"difference": -5.0},
        "assumptions": {"sd": 12.0},
    },
    {
        "outcome": "continuous",
        "layout": "single_group",
        "effect": {"difference": -1.0},
        "assumptions": {"sd": 2.0},
    },
    {
        "outcome": "continuous",
        "layout": "paired",
        "effect": {"difference": -1.0},
        "assumptions": {"sd_difference": 2.0},
    },
    {
        "outcome": "binary",
        "layout": "two_groups",
        "effect": {"p_treatment": 0.05},
        "assumptions": {"p_control": 0.10},
    },
    {
        "outcome": "association",
        "layout": "single_group",
        "effect": {"r": 0.1},
        "assumptions": {"r_null": 0.3},
    },
    {"outcome": "ordinal", "layout": "two_groups", "effect": {"prob_superiority": 0.38}},
    {**SURV, "effect": {"hazard_ratio": 1.4}},  # shorter times to the event
]
IDS = [f"{q['outcome']} x {q['layout']}" for q in LOWER]
ONE = {"alternative": "one-sided"}


@pytest.mark.parametrize("raw", LOWER, ids=IDS)
def test_unstated_direction_is_taken_from_the_effect(raw):
    q = load_question({**raw, **ONE})
    assert q["hypothesis"]["higher_is_better"] is False
    assert load_question(q) == q  # the normalized question loads again unchanged


@pytest.mark.parametrize("raw", LOWER, ids=IDS)
def test_a_stated_direction_against_the_effect_is_refused(raw):
    with pytest.raises(QuestionInvalid) as err:
        load_question({**raw, **ONE, "hypothesis": {"higher_is_better": True}})
    (message,) = err.value.errors["hypothesis.higher_is_better"]
    assert "is true" in message and "points to" in message and "two-sided" in message
    # Stated the same way as the effect, it is accepted.
    q = load_question({**raw, **ONE, "hypothesis": {"higher_is_better": False}})
    assert q["hypothesis"]["higher_is_better"] is False


@pytest.mark.parametrize("raw", LOWER, ids=IDS)
def test_two_sided_questions_keep_their_stated_or_default_direction(raw):
    assert load_question(raw)["hypothesis"]["higher_is_better"] is True
    stated = load_question({**raw, "hypothesis": {"higher_is_better": True}})
    assert stated["hypothesis"]["higher_is_better"] is True


def test_positive_effects_are_unchanged():
    raw = {**LOWER[0], **ONE, "effect": {"difference": 5.0}}
    assert load_question(raw)["hypothesis"]["higher_is_better"] is True
    with pytest.raises(QuestionInvalid) as err:
        load_question({**raw, "hypothesis": {"higher_is_better": False}})
    assert "is false" in err.value.errors["hypothesis.higher_is_better"][0]


def test_a_data_model_gives_the_direction_of_a_simulation():
    raw = {
        "outcome": "ordinal",
        "layout": "two_groups",
        **ONE,
        "method": "simulation",
        "simulation": {
            "seed": 1,
            "data": {
                "control": {"family": "normal", "mean": 120.0, "sd": 12.0},
                "treatment": {"family": "normal", "mean": 115.0, "sd": 12.0},
            },
        },
    }
    assert load_question(raw)["hypothesis"]["higher_is_better"] is False
    with pytest.raises(QuestionInvalid) as err:
        load_question({**raw, "hypothesis": {"higher_is_better": True}})
    assert "the data model" in err.value.errors["hypothesis.higher_is_better"][0]


def test_noninferiority_keeps_higher_is_better_and_find_effect_is_not_touched():
    ni = {
        **LOWER[0],
        "effect": {"difference": -1.0},
        "hypothesis": {"aim": "noninferiority", "margin": -4.0},
    }
    assert load_question(ni)["hypothesis"]["higher_is_better"] is True
    effect = {
        **LOWER[0],
        "find": "effect",
        **ONE,
        "sample_size": {"per_group": [50, 50]},
        "effect": {},
        "hypothesis": {"higher_is_better": False},
    }
    assert load_question(effect)["hypothesis"]["higher_is_better"] is False
