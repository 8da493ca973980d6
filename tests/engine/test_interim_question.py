"""Questions with interim analyses: maximum size by the inflation factor, sequential power,
refusals naming the field, and the sequential test on simulated trial data.

Sources: the inflation factor is the definition of Jennison & Turnbull (2000), ch. 2 (maximum
information = fixed information × R); the boundaries are checked against their published
constants in test_sequential.py. The data checks simulate whole trials (normal outcomes and
binary outcomes in two groups) and apply the record's boundaries at the looks.
"""

from __future__ import annotations

import json
from importlib import resources

import numpy as np
import pytest

from service.engine import compute
from service.schemas.errors import QuestionInvalid
from service.schemas.question import load_question


def _example() -> dict:
    text = resources.files("service.examples").joinpath("northbridge_bp_interim.json")
    return json.loads(text.read_text("utf-8"))


def _answer(**changes) -> dict:
    return compute(load_question({**_example(), **changes}))


def test_maximum_size_is_the_fixed_size_times_the_inflation_factor():
    fixed = compute(load_question({k: v for k, v in _example().items() if k != "interim"}))
    record = _answer()
    step = record["sample_size"]["steps"][0]
    assert step["step"] == "interim"
    # the fixed design's unrounded size is the one the cell solves without interim analyses
    assert step["fixed_per_group_raw"] == fixed["sample_size"]["steps"][0]["per_group_raw"]
    inflation = record["sequential"]["inflation"]
    assert 1.0 < inflation < 1.03  # O'Brien-Fleming-type spending costs little (J&T 2000, ch. 2)
    np.testing.assert_allclose(
        step["per_group_raw"], [x * inflation for x in step["fixed_per_group_raw"]]
    )
    assert record["sample_size"]["per_group"] >= fixed["sample_size"]["per_group"]
    looks = record["sequential"]["looks"]
    assert [row["look"] for row in looks] == [1, 2, 3]
    assert looks[-1]["alpha_spent"] == pytest.approx(0.05)
    assert record["power"]["estimate"] >= 0.9
    # without interim analyses the record has no sequential block and keeps its digits
    assert "sequential" not in fixed and "interim" not in fixed["question"]


def test_power_and_effect_questions_agree_with_the_sample_size_answer():
    record = _answer()
    analyzed = record["sample_size"]["steps"][1]["per_group"]  # the base step, before dropout
    power = _answer(
        find="power", sample_size={"per_group": analyzed}, target_power=None, adjustments=None
    )
    assert power["power"]["estimate"] == pytest.approx(record["power"]["estimate"], abs=1e-9)
    effect = _answer(
        find="effect",
        effect=None,
        sample_size={"per_group": analyzed},
        adjustments=None,
    )
    # the smallest detectable difference at the solved size is just below the assumed 5
    assert 4.8 < effect["effect"]["value"] <= 5.0
    # the effect is solved on the fixed design at n / IF, whose t test has fewer degrees of
    # freedom than the one at n: the sequential power lands within 0.001 of the target
    assert effect["power"]["estimate"] == pytest.approx(0.9, abs=1e-3)


def test_time_to_event_looks_count_events():
    body = {
        "outcome": "time_to_event",
        "layout": "two_groups",
        "find": "sample_size",
        "alpha": 0.025,
        "alternative": "one-sided",
        "target_power": 0.9,
        "effect": {"hazard_ratio": 0.75},
        "assumptions": {
            "time_unit": "months",
            "control_median": 12.0,
            "accrual": 24.0,
            "follow_up": 12.0,
        },
        "interim": {"looks": 3, "futility_spending": "hwang_shih_decani"},
    }
    fixed = compute(load_question({k: v for k, v in body.items() if k != "interim"}))
    record = compute(load_question(body))
    inflation = record["sequential"]["inflation"]
    events = record["events"]
    assert events["fixed_required"] == fixed["events"]["required"]
    assert events["required"] == int(np.ceil(fixed["events"]["raw"] * inflation - 1e-9))
    assert [row["events"] for row in record["sequential"]["looks"]][-1] == events["required"]
    futility = [row["futility_z"] for row in record["sequential"]["looks"]]
    assert futility[-1] is None and all(f is not None for f in futility[:-1])
    assert record["sequential"]["expected_events_alternative"] < events["required"]
    assert record["power"]["estimate"] >= 0.9 - 1e-6
    # a power question at the same sizes counts its looks in expected events, too
    power = compute(
        load_question(
            {
                **body,
                "find": "power",
                "target_power": None,
                "sample_size": {"per_group": record["sample_size"]["per_group"]},
            }
        )
    )
    final = power["sequential"]["looks"][-1]["events"]
    assert abs(final - events["required"]) <= 2  # expected events at the rounded-up sizes


def test_one_sample_t_cells_take_interim_analyses():
    # a paired question (SD of the differences 8, difference 2): the maximum size is the fixed
    # size times the inflation factor, Pocock-type spending costing more than O'Brien-Fleming's
    body = {
        "outcome": "continuous",
        "layout": "paired",
        "effect": {"difference": 2.0},
        "assumptions": {"sd_difference": 8.0},
    }
    fixed = compute(load_question(body))["sample_size"]["steps"][0]["per_group_raw"][0]
    answers = {}
    for family in ("pocock", "obrien_fleming"):
        record = compute(
            load_question({**body, "interim": {"looks": 4, "efficacy_spending": family}})
        )
        step = record["sample_size"]["steps"][0]
        assert step["fixed_per_group_raw"][0] == pytest.approx(fixed)
        answers[family] = record["sequential"]["inflation"]
        assert record["power"]["estimate"] >= 0.8
    assert answers["pocock"] > answers["obrien_fleming"] > 1.0


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        (
            {
                "outcome": "continuous",
                "layout": "k_groups",
                "effect": {"cohens_f": 0.25},
                "assumptions": {"group_count": 3},
            },
            "interim",
        ),
        (
            {
                "method": "simulation",
                "alternative": "one-sided",
                "interim": {"looks": 3, "futility_spending": "pocock"},
            },
            "interim.futility_spending",
        ),
        ({"method": "simulation", "analysis": "ancova"}, "analysis"),
        ({"interim": {"looks": 3, "futility_spending": "pocock"}}, "interim.futility_spending"),
        (
            {"interim": {"looks": 3, "information_fractions": [0.5, 1.0]}},
            "interim.information_fractions",
        ),
        (
            {"interim": {"looks": 2, "information_fractions": [0.6, 0.9]}},
            "interim.information_fractions",
        ),
        ({"interim": {"looks": 3, "efficacy_gamma": -2}}, "interim.efficacy_gamma"),
        ({"interim": {"looks": 11}}, "interim.looks"),
        ({"interim": {"efficacy_spending": "pocock"}}, "interim.looks"),
        ({"interim": {"looks": 3, "efficacy_spending": "linear"}}, "interim.efficacy_spending"),
    ],
)
def test_refusals_name_the_field(changes, field):
    with pytest.raises(QuestionInvalid) as caught:
        load_question({**_example(), **changes})
    assert field in caught.value.errors, caught.value.errors


def _looks_of(record):
    looks = record["sequential"]["looks"]
    return [row["per_group"][0] for row in looks], np.array([row["efficacy_z"] for row in looks])


def _power_by_simulation(z, upper, two_sided):
    crossed = np.abs(z) >= upper if two_sided else z >= upper
    return crossed.any(axis=1).mean()


def test_sequential_test_on_simulated_normal_trials():
    # Whole trials: normal outcomes (difference -5, SD 12), the z statistic of the difference in
    # means at each look on the data so far, rejected at the record's boundaries.
    record = _answer()
    sizes, upper = _looks_of(record)
    n = sizes[-1]
    rng = np.random.default_rng(20261202)
    replicates = 6000
    control = rng.normal(0.0, 12.0, size=(replicates, n))
    treated = rng.normal(-5.0, 12.0, size=(replicates, n))
    z = np.stack(
        [
            (treated[:, :m].mean(1) - control[:, :m].mean(1))
            / np.sqrt((treated[:, :m].var(1, ddof=1) + control[:, :m].var(1, ddof=1)) / m)
            for m in sizes
        ],
        axis=1,
    )
    simulated = _power_by_simulation(z, upper, True)
    mcse = np.sqrt(simulated * (1 - simulated) / replicates)
    assert abs(simulated - record["power"]["estimate"]) <= 4 * mcse
    early = (np.abs(z[:, :-1]) >= upper[:-1]).any(axis=1).mean()
    looks = record["sequential"]["looks"]
    expected_early = sum(row["stop_alternative"]["efficacy"] for row in looks[:-1])
    assert abs(early - expected_early) <= 4 * np.sqrt(
        expected_early * (1 - expected_early) / replicates
    )


def test_sequential_test_on_simulated_binary_trials():
    # Two proportions (10% vs 5%), pooled z at each look, Pocock-type spending; also under the
    # null (5% in both groups): the overall type I error holds at alpha.
    body = {
        "outcome": "binary",
        "layout": "two_groups",
        "find": "sample_size",
        "target_power": 0.8,
        "effect": {"p_treatment": 0.05},
        "assumptions": {"p_control": 0.10},
        "interim": {"looks": 3, "efficacy_spending": "pocock"},
    }
    record = compute(load_question(body))
    sizes, upper = _looks_of(record)
    n = sizes[-1]
    rng = np.random.default_rng(7)
    replicates = 6000
    for p_treated, expected in ((0.05, record["power"]["estimate"]), (0.10, 0.05)):
        control = np.cumsum(rng.random((replicates, n)) < 0.10, axis=1)
        treated = np.cumsum(rng.random((replicates, n)) < p_treated, axis=1)
        cols = np.asarray(sizes) - 1
        x1, x2 = control[:, cols], treated[:, cols]
        pooled = (x1 + x2) / (2 * np.asarray(sizes))
        se = np.sqrt(pooled * (1 - pooled) * 2 / np.asarray(sizes))
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(se > 0, (x1 - x2) / np.asarray(sizes) / se, 0.0)
        simulated = _power_by_simulation(z, upper, True)
        mcse = np.sqrt(expected * (1 - expected) / replicates)
        assert abs(simulated - expected) <= 4 * mcse, (p_treated, simulated, expected)
