"""A cell registered from outside the engine (tests/engine/toy_design.py, no engine file edited)
is answered by ``compute`` for every find, refused clearly where it offers nothing, and gone
again once unregistered."""

from __future__ import annotations

import math

import pytest
from scipy import stats

from service.engine import QuestionError, compute, designs
from service.engine.examples import example_question
from service.engine.records import verify
from tests.engine import toy_design


@pytest.fixture
def toy():
    design = toy_design.register()
    yield design
    toy_design.unregister()


def _question(**overrides) -> dict:
    """The engine's worked example question, moved to the toy cell."""
    toy_cell = {
        "outcome": "toy_count",
        "layout": "single_group",
        "analysis": "log_rate_z",
        "effect": {"rate_ratio": 1.5},
        "assumptions": {"reference_rate": 2.0},
    }
    return example_question(**{**toy_cell, **overrides})


def test_the_registry_lists_the_toy_cell_only_while_registered(toy) -> None:
    assert designs.get("toy_count", "single_group") is toy
    assert "toy_count × single_group" in designs.cells()
    toy_design.unregister()
    with pytest.raises(QuestionError) as info:
        designs.get("toy_count", "single_group")
    assert info.value.field == "outcome"
    toy_design.register()


def test_compute_answers_the_toy_sample_size(toy) -> None:
    # formula: n = (z.975 + z.80)² / (λ₁·ln²RR), λ₁ = 1.5 × 2 = 3 (scipy quantiles)
    z = stats.norm.ppf(0.975) + stats.norm.ppf(0.8)
    raw = z * z / (3.0 * math.log(1.5) ** 2)
    record = compute(_question())
    assert verify(record)
    assert record["sample_size"]["steps"][0]["per_group_raw"] == [pytest.approx(raw, rel=1e-12)]
    assert record["sample_size"]["per_group"] == [math.ceil(raw)]
    assert record["power"]["estimate"] >= 0.8
    assert record["method"]["analysis"] == "log_rate_z"
    assert record["method"]["analysis_label"] == "Wald test of the log rate"


def test_compute_answers_the_toy_power_and_effect(toy) -> None:
    record = compute(_question(find="power", target_power=None, sample_size={"per_group": [20]}))
    # formula: Φ(|ln 1.5|·√(20·3) − z.975) + Φ(−|ln 1.5|·√(20·3) − z.975)
    shift = math.log(1.5) * math.sqrt(60)
    z_a = stats.norm.ppf(0.975)
    expected = stats.norm.cdf(shift - z_a) + stats.norm.cdf(-shift - z_a)
    assert record["power"]["estimate"] == pytest.approx(expected, rel=1e-9)
    solved = compute(_question(find="effect", effect={}, sample_size={"per_group": [20]}))
    ratio = solved["effect"]["value"]
    assert solved["effect"]["field"] == "rate_ratio" and ratio > 1
    assert solved["power"]["estimate"] == pytest.approx(0.8, abs=1e-9)


def test_the_toy_cell_is_checked_and_refused_where_it_offers_nothing(toy) -> None:
    with pytest.raises(QuestionError) as info:
        compute(_question(assumptions={}))
    assert info.value.field == "assumptions.reference_rate"
    with pytest.raises(QuestionError) as info:
        compute(_question(analysis="exact_poisson"))
    assert info.value.field == "analysis" and "log_rate_z" in info.value.message
    with pytest.raises(QuestionError) as info:
        compute(
            _question(
                find="power",
                target_power=None,
                sample_size={"per_group": [20]},
                method="simulation",
                simulation={"seed": 1, "replicates": 200},
            )
        )
    assert info.value.field == "method" and "analytic" in info.value.message
