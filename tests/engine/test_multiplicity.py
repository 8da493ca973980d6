"""Holm and Hochberg for ``adjustments.comparisons`` (adjustments.multiplicity).

Sources: the decisions against statsmodels.stats.multitest.multipletests (Holm; Simes–Hochberg;
Bonferroni: *general-purpose library check*); with independent comparisons Bonferroni's power
for at least one of k is 1 − (1 − π)^k and for all k is π^k (*formula*, π the per-comparison
power), and Holm's power for at least one equals Bonferroni's (its first step is Bonferroni's
test: Holm 1979, *formula*); the per-comparison power under Bonferroni is the record's own.
"""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from service.engine import compute, multiplicity
from service.reports.justification import justification
from service.schemas import load_question
from service.schemas.errors import QuestionInvalid


def _body(**adjust) -> dict:
    return {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "target_power": 0.8,
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "adjustments": {"comparisons": 3, **adjust},
    }


def test_decisions_match_statsmodels_multipletests():
    rng = np.random.default_rng(11)
    p = rng.beta(0.3, 1.0, size=(60, 4))
    for name, method in (
        ("bonferroni", "bonferroni"),
        ("holm", "holm"),
        ("hochberg", "simes-hochberg"),
    ):
        ours = multiplicity.rejections(p, 0.05, name)
        theirs = np.array([multipletests(row, alpha=0.05, method=method)[0] for row in p])
        assert np.array_equal(ours, theirs), name
        assert ours.any() and not ours.all()


@pytest.mark.parametrize("name", ["holm", "hochberg"])
def test_independent_comparisons_against_the_bonferroni_formulas(name):
    record = compute(load_question(_body(multiplicity=name)))
    block = record["multiplicity"]
    each = record["power"]["estimate"]  # the per-comparison power at alpha/k
    bonf, ours = block["bonferroni"], block["power"]
    k = 3

    def near(x: dict, value: float) -> None:
        assert abs(x["estimate"] - value) <= 4 * x["mcse"], (x, value)

    near(bonf["each"], each)
    near(bonf["any"], 1 - (1 - each) ** k)
    near(bonf["all"], each**k)
    if name == "holm":  # same first step: the same disjunctive power, replicate by replicate
        assert ours["any"]["estimate"] == bonf["any"]["estimate"]
    assert ours["all"]["estimate"] > bonf["all"]["estimate"]
    assert ours["each"]["estimate"] > bonf["each"]["estimate"]
    # the size is Bonferroni's: the same as without the block
    plain = compute(load_question(_body()))
    assert record["sample_size"] == plain["sample_size"]
    assert "multiplicity" not in plain and "multiplicity" not in plain["question"]["adjustments"]


def test_correlation_and_order_of_procedures():
    holm = compute(load_question(_body(multiplicity="holm", comparisons_correlation=0.5)))
    hoch = compute(load_question(_body(multiplicity="hochberg", comparisons_correlation=0.5)))
    # same seed, same statistics: Hochberg rejects whatever Holm rejects
    assert (
        hoch["multiplicity"]["power"]["all"]["estimate"]
        >= (holm["multiplicity"]["power"]["all"]["estimate"])
    )
    # positive correlation makes "all" likelier than under independence (π^k)
    each = holm["power"]["estimate"]
    assert holm["multiplicity"]["bonferroni"]["all"]["estimate"] > each**3 + 0.02
    text = justification(hoch)
    assert "Hochberg's step-up procedure" in text and "correlated (0.5)" in text


def test_null_type_i_error_is_held():
    # a power question at no effect: the familywise rate ("any") stays at alpha for each
    # procedure (Hochberg: independent or positively correlated statistics)
    body = _body(multiplicity="hochberg", comparisons_correlation=0.3)
    body.update(find="power", target_power=None, sample_size={"per_group": [50, 50]})
    body["effect"] = {"difference": 0.0}
    block = compute(load_question(body))["multiplicity"]
    for procedure in ("power", "bonferroni"):
        rate = block[procedure]["any"]
        assert rate["estimate"] <= 0.05 + 4 * rate["mcse"]


@pytest.mark.parametrize(
    ("adjust", "field"),
    [
        ({"multiplicity": "sidak"}, "adjustments.multiplicity"),
        ({"comparisons_correlation": 1.2}, "adjustments.comparisons_correlation"),
        ({"comparisons_correlation": -0.2}, "adjustments.comparisons_correlation"),
    ],
)
def test_refusals_name_the_field(adjust, field):
    with pytest.raises(QuestionInvalid) as caught:
        load_question(_body(**adjust))
    assert field in caught.value.errors, caught.value.errors


def test_engine_refusals_name_the_field():
    from service.engine.errors import QuestionError

    body = _body(multiplicity="holm", comparisons_correlation=0.2)
    body["adjustments"]["comparisons"] = 1
    with pytest.raises(QuestionError) as caught:
        compute(load_question(body))
    assert caught.value.field == "adjustments.comparisons_correlation"
    body = _body(multiplicity="holm")
    body["adjustments"]["comparisons"] = 500
    with pytest.raises(QuestionError) as caught:
        compute(load_question(body))
    assert caught.value.field == "adjustments.comparisons"
