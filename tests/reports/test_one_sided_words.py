"""The justification says which way a one-sided test looked: where the assumed effect points."""

from __future__ import annotations

import math

import pytest
from statsmodels.stats.power import TTestIndPower

from service.engine import compute
from service.reports.justification import justification
from service.schemas import load_question


@pytest.mark.parametrize(
    "effect,words",
    [
        ({"difference": -5.0, "sd": 12.0}, "a lower value than under the null"),
        ({"difference": 5.0, "sd": 12.0}, "a higher value than under the null"),
    ],
)
def test_one_sided_two_means_names_its_alternative(effect, words):
    record = compute(load_question({"design": "two_means", "sides": 1, "effect": effect}))
    # noncentral t, one-sided 0.05, d = 5/12, power .80 (statsmodels TTestIndPower, the
    # alternative towards the effect): both signs need the same size
    side = "larger" if effect["difference"] > 0 else "smaller"
    d = effect["difference"] / effect["sd"]
    n = TTestIndPower().solve_power(effect_size=d, alpha=0.05, power=0.8, alternative=side)
    assert record["sample_size"]["per_arm"] == [math.ceil(n)] * 2
    assert f"one-sided significance level of 0.05 (the alternative: {words})" in justification(
        record
    )


def test_survival_words_are_about_times():
    q = load_question(
        {
            "design": "survival_logrank",
            "sides": 1,
            "effect": {
                "hazard_ratio": 1.4,
                "median_control": 12.0,
                "accrual_period": 24.0,
                "follow_up": 12.0,
            },
        }
    )
    assert "(the alternative: shorter times to the event)" in justification(compute(q))
