"""Time to event, Cox regression (time_to_event × regression): Hsieh & Lavori (2000), Control
Clin Trials 21:552, recomputed with scipy; with a binary covariate of prevalence 0.5 it is
Schoenfeld's (1983) events formula for two equal groups."""

from __future__ import annotations

import math

import pytest
from scipy import stats

from service.engine import compute
from service.schemas import QuestionInvalid, load_question

Z = stats.norm.ppf


def cox(**over) -> dict:
    body = {
        "outcome": "time_to_event",
        "layout": "regression",
        "find": "sample_size",
        "effect": {"hazard_ratio": 1.3},
        "assumptions": {"sd_covariate": 1.0, "event_probability": 0.25},
    }
    body.update(over)
    return body


def answer(body: dict) -> dict:
    return compute(load_question(body))


@pytest.mark.parametrize(("hr", "sd", "r2", "power"), [(1.3, 1.0, 0.0, 0.8), (0.8, 2.5, 0.3, 0.9)])
def test_events_by_hsieh_lavori(hr, sd, r2, power):
    # formula: Hsieh & Lavori (2000), D = (z_{1−α/2} + z_{1−β})² / (σ²·(ln HR)²·(1 − R²)),
    # n = D / P(event); the subjects are the whole events over P(event).
    d = (Z(0.975) + Z(power)) ** 2 / (sd**2 * math.log(hr) ** 2 * (1 - r2))
    record = answer(
        cox(
            effect={"hazard_ratio": hr},
            assumptions={"sd_covariate": sd, "event_probability": 0.4, "r2_covariates": r2},
            target_power=power,
        )
    )
    events = record["events"]
    assert events["raw"] == pytest.approx(d, rel=1e-12)
    assert events["required"] == math.ceil(d)
    assert record["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(
        math.ceil(d) / 0.4
    )
    assert record["sample_size"]["total"] == math.ceil(math.ceil(d) / 0.4 - 1e-9)


def test_binary_covariate_at_one_half_is_schoenfeld():
    # formula: Schoenfeld (1983), D = 4(z_{1−α/2} + z_{1−β})²/(ln HR)² for two equal groups;
    # HR 0.75, alpha 0.05, power 0.8: D = 379.4, 380 events. The project's own two-group log-rank
    # cell with the Schoenfeld formula needs the same events.
    d = 4 * (Z(0.975) + Z(0.8)) ** 2 / math.log(0.75) ** 2
    record = answer(
        cox(
            effect={"hazard_ratio": 0.75},
            assumptions={"covariate_prevalence": 0.5, "event_probability": 0.5},
        )
    )
    assert record["events"]["raw"] == pytest.approx(d, rel=1e-12)
    assert record["events"]["required"] == 380
    two_groups = answer(
        {
            "outcome": "time_to_event",
            "layout": "two_groups",
            "find": "sample_size",
            "effect": {"hazard_ratio": 0.75},
            "assumptions": {
                "time_unit": "months",
                "control_median": 12,
                "accrual": 12,
                "follow_up": 24,
            },
            "analysis_options": {"events_formula": "schoenfeld"},
        }
    )
    assert two_groups["events"]["required"] == record["events"]["required"]


def test_power_and_effect_at_a_given_size():
    record = answer(cox(find="power", sample_size={"per_group": [1000]}))
    # formula: power = Φ(√(n·P·σ²)·|ln HR| − z_{1−α/2}) (+ the far tail)
    shift = math.sqrt(1000 * 0.25) * math.log(1.3)
    expected = stats.norm.cdf(shift - Z(0.975)) + stats.norm.cdf(-shift - Z(0.975))
    assert record["power"]["estimate"] == pytest.approx(expected, abs=1e-12)
    solved = answer(
        cox(find="effect", effect={}, sample_size={"per_group": [1000]}, target_power=0.8)
    )
    hr = solved["effect"]["value"]
    assert hr < 1  # higher is better: longer times, a hazard ratio below 1
    assert math.sqrt(250) * abs(math.log(hr)) == pytest.approx(Z(0.975) + Z(0.8), abs=1e-3)


def test_bad_input_is_refused_naming_the_field():
    with pytest.raises(QuestionInvalid) as e:
        load_question(cox(assumptions={"sd_covariate": 1.0}))
    assert "assumptions.event_probability" in e.value.errors
    with pytest.raises(QuestionInvalid) as e:
        load_question(cox(effect={"hazard_ratio": 1.0}))
    assert "effect.hazard_ratio" in e.value.errors


@pytest.mark.parametrize(
    ("n", "hr", "assumptions"),
    [
        (400, 1.3, {"sd_covariate": 1.0, "event_probability": 0.4}),
        (
            500,
            0.8,
            {"covariate_prevalence": 0.5, "event_probability": 0.5, "r2_covariates": 0.2},
        ),
    ],
)
def test_simulated_cox_power_agrees_with_the_formula(n, hr, assumptions):
    # The Cox model fitted by Newton–Raphson on the partial likelihood in every replicate,
    # exponential times censored at a common time giving P(event); near HR 1 the formula's
    # information σ²·(1 − R²) per event holds (for strong effects on a factor the events split
    # unevenly and the formula is optimistic, which the simulation shows).
    record = answer(
        cox(
            find="power",
            sample_size={"per_group": [n]},
            effect={"hazard_ratio": hr},
            assumptions=assumptions,
            method="simulation",
            simulation={"replicates": 2000, "seed": 20261202},
        )
    )
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) < 4 * power["mcse"]
    assert record["type_i_error"]["verdict"] != "exceeds"
    mean_events = record["events"]["simulated"]["mean_per_replicate"]
    assert mean_events == pytest.approx(n * assumptions["event_probability"], rel=0.03)
