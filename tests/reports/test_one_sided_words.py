"""The justification says which way a one-sided test looked: where the assumed effect points."""

from __future__ import annotations

import math

import pytest
from reports_testkit import SURVIVAL, answer
from statsmodels.stats.power import TTestIndPower

from service.reports.justification import justification


@pytest.mark.parametrize(
    "difference,words",
    [
        (-5.0, "a lower value than under the null"),
        (5.0, "a higher value than under the null"),
    ],
)
def test_one_sided_two_groups_names_its_alternative(difference, words):
    record = answer(
        alternative="one-sided", effect={"difference": difference}, assumptions={"sd": 12.0}
    )
    # noncentral t, one-sided 0.05, d = 5/12, power .80 (statsmodels TTestIndPower, the
    # alternative towards the effect): both signs need the same size
    side = "larger" if difference > 0 else "smaller"
    n = TTestIndPower().solve_power(
        effect_size=difference / 12.0, alpha=0.05, power=0.8, alternative=side
    )
    assert record["sample_size"]["per_group"] == [math.ceil(n)] * 2
    assert f"one-sided significance level of 0.05 (the alternative: {words})" in justification(
        record
    )


def test_survival_words_are_about_times():
    record = answer(**dict(SURVIVAL, effect={"hazard_ratio": 1.4}), alternative="one-sided")
    assert "(the alternative: shorter times to the event)" in justification(record)
