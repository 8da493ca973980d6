"""Happy-path normalization: defaults and derived fields per design (DEVELOPERS.md, "The question")."""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.engine.designs import DESIGN_NAMES, FORMULAS, TESTS
from service.schemas import QuestionSchema, load_question
from service.schemas.question import split_total
from tests.schemas.posted import SURV


def test_defaults_filled_for_a_minimal_question() -> None:
    q = load_question({"design": "two_means", "effect": {"difference": 0.5, "sd": 1.0}})
    assert q == {
        "design": "two_means",
        "find": "sample_size",
        "alpha": 0.05,
        "sides": 2,
        "target_power": 0.80,  # common practice, no source (DEVELOPERS.md default)
        "sample_size": None,
        "allocation_ratio": 1.0,
        "allocation_rounding": "each_arm",
        "effect": {"difference": 0.5, "sd_control": 1.0, "sd_treatment": 1.0},
        "hypothesis": {"kind": "superiority", "margin": None, "higher_is_better": True},
        "adjustments": {"dropout": 0.0, "cluster": None, "comparisons": 1},
        "method": "analytic",
        "formula": "student",
        "simulation": None,
    }


def test_schema_load_and_load_question_agree() -> None:
    raw = {"design": "correlation", "effect": {"r": 0.3}}
    assert QuestionSchema().load(raw) == load_question(raw)


def test_two_means_unequal_sds_default_to_welch() -> None:
    q = load_question(
        {
            "design": "two_means",
            "effect": {"difference": 1.0, "sd_control": 1.0, "sd_treatment": 2.0},
        }
    )
    assert q["formula"] == "welch"
    assert q["effect"] == {"difference": 1.0, "sd_control": 1.0, "sd_treatment": 2.0}


def test_paired_sd_and_correlation_give_sd_difference() -> None:
    # formula: sd_diff = sd*sqrt(2(1-rho)); delta/sigma 0.5, rho 0.7 -> d_z 0.6455
    q = load_question(
        {"design": "paired_mean", "effect": {"difference": 0.5, "sd": 1.0, "correlation": 0.7}}
    )
    assert q["effect"]["difference"] / q["effect"]["sd_difference"] == pytest.approx(
        0.6455, abs=1e-4
    )
    assert set(q["effect"]) == {"difference", "sd_difference"}


def test_anova_group_means_give_cohens_f() -> None:
    # formula: Cohen 1988 eq. 8.2.1, f = sigma_m / sigma with sigma_m the SD of the means
    # (divisor k); recomputed with numpy.std(ddof=0)
    means = [120.0, 115.0, 112.0]
    q = load_question({"design": "anova_oneway", "effect": {"group_means": means, "sd": 15.0}})
    assert q["effect"]["cohens_f"] == pytest.approx(np.std(means, ddof=0) / 15.0, rel=1e-12)
    assert q["effect"]["groups"] == 3
    assert q["effect"]["group_means"] == means and q["effect"]["sd"] == 15.0


def test_anova_f_and_groups_are_kept() -> None:
    q = load_question({"design": "anova_oneway", "effect": {"cohens_f": 0.25, "groups": 4}})
    assert q["effect"] == {"cohens_f": 0.25, "groups": 4}


def test_survival_median_gives_constant_hazard() -> None:
    # formula: exponential survival, S(median) = 1/2 -> hazard = ln 2 / median
    q = load_question(SURV)  # control median 12
    e = q["effect"]
    assert e["hazard_control"] == pytest.approx(math.log(2) / 12.0, rel=1e-15)
    assert math.exp(-e["hazard_control"] * 12.0) == pytest.approx(0.5)
    assert e["median_control"] == 12.0 and e["loss_rate"] == 0.0
    assert q["formula"] == "schoenfeld"


def test_survival_event_rate_is_the_hazard() -> None:
    q = load_question(
        {
            "design": "survival_logrank",
            "effect": {
                "hazard_ratio": 0.7,
                "event_rate_control": 0.05,
                "accrual_period": 12,
                "follow_up": 0,
            },
        }
    )
    assert q["effect"]["hazard_control"] == 0.05 and "median_control" not in q["effect"]


def test_proportions_and_correlation_defaults() -> None:
    p = load_question(
        {"design": "two_proportions", "effect": {"p_control": 0.05, "p_treatment": 0.10}}
    )
    assert p["effect"]["continuity_correction"] is False and p["formula"] == "pooled_z"
    r = load_question({"design": "correlation", "effect": {"r": 0.3}})
    assert r["effect"] == {"r": 0.3, "r0": 0.0} and r["allocation_ratio"] == 1.0


@pytest.mark.parametrize("kind, margin", [("noninferiority", -0.05), ("equivalence", 0.05)])
def test_margin_hypotheses_are_one_sided(kind: str, margin: float) -> None:
    # Chow, Shao & Wang (2008), ch. 3 (NI and TOST): sigma 0.1, margin 0.05, one-sided alpha .05
    q = load_question(
        {
            "design": "two_means",
            "alpha": 0.05,
            "hypothesis": {"kind": kind, "margin": margin},
            "effect": {"difference": 0.05 if kind == "noninferiority" else 0.0, "sd": 0.1},
        }
    )
    assert q["sides"] == 1 and q["hypothesis"] == {
        "kind": kind,
        "margin": margin,
        "higher_is_better": True,
    }


def test_find_power_keeps_n_and_drops_target() -> None:
    q = load_question(
        {
            "design": "two_means",
            "find": "power",
            "sample_size": {"per_arm": [30, 30]},
            "effect": {"difference": 0.5, "sd": 1.0},
        }
    )
    assert q["sample_size"] == {"per_arm": [30, 30]} and q["target_power"] is None


def test_find_effect_has_no_solved_field() -> None:
    q = load_question(
        {
            "design": "two_proportions",
            "find": "effect",
            "sample_size": {"total": 200},
            "effect": {"p_control": 0.3},
        }
    )
    assert "p_treatment" not in q["effect"] and q["target_power"] == 0.8
    assert q["sample_size"] == {"per_arm": [100, 100]}


@pytest.mark.parametrize(
    "total, weights, expected",
    [
        # common practice, no source: Hamilton's largest-remainder method, worked by hand
        (61, [1, 2], [20, 41]),  # quotas 20.33, 40.67
        (100, [1, 1], [50, 50]),
        (101, [1, 1], [51, 50]),  # tie on .5: control (first arm) gets the extra one
        (10, [1, 1, 1], [4, 3, 3]),  # quotas 3.33 each; ties go to the earlier groups
        (7, [1, 1.5], [3, 4]),  # quotas 2.8, 4.2
    ],
)
def test_split_total_largest_remainders(total: int, weights: list, expected: list) -> None:
    assert split_total(total, weights) == expected and sum(expected) == total


def test_total_split_by_allocation_in_question() -> None:
    # formula: noncentral t, Cohen (1988) eq. 2.3.1: allocation 2:1 on d = 0.5 gives 48 / 96 per arm, 144 in total
    q = load_question(
        {
            "design": "two_means",
            "find": "power",
            "allocation_ratio": 2.0,
            "sample_size": {"total": 144},
            "effect": {"difference": 0.5, "sd": 1.0},
        }
    )
    assert q["sample_size"] == {"per_arm": [48, 96]}


def test_anova_total_split_equally() -> None:
    q = load_question(
        {
            "design": "anova_oneway",
            "find": "power",
            "sample_size": {"total": 160},
            "effect": {"cohens_f": 0.25, "groups": 4},
        }
    )
    assert q["sample_size"] == {"per_arm": [40, 40, 40, 40]}


def test_find_effect_by_simulation_without_a_data_model_loads() -> None:
    q = load_question(
        {
            "design": "two_means",
            "find": "effect",
            "method": "simulation",
            "sample_size": {"per_arm": [64, 64]},
            "effect": {"sd": 1.0},
            "simulation": {"replicates": 2000, "seed": 7},
        }
    )
    assert q["find"] == "effect" and q["method"] == "simulation"
    assert q["effect"] == {"sd_control": 1.0, "sd_treatment": 1.0}  # difference is solved for
    assert q["simulation"]["data"] is None and q["simulation"]["seed"] == 7
    assert q["sample_size"] == {"per_arm": [64, 64]} and q["target_power"] == 0.8


def test_simulation_defaults_and_seed_none() -> None:
    q = load_question(
        {"design": "two_means", "method": "simulation", "effect": {"difference": 0.5, "sd": 1.0}}
    )
    assert q["simulation"] == {
        "replicates": 10000,
        "seed": None,
        "test": TESTS["two_means"][0],
        "data": None,
        "decision_rule": "point",
        "chunk_size": 1000,
        "search_replicates": 2000,
    }


def test_rank_sum_with_only_a_data_model_defaults_to_simulation() -> None:
    arm = {"family": "lognormal", "mu": 0.0, "sigma": 1.0}
    q = load_question(
        {
            "design": "rank_sum",
            "simulation": {"seed": 5, "data": {"control": arm, "treatment": dict(arm, mu=0.5)}},
        }
    )
    assert q["method"] == "simulation" and q["simulation"]["seed"] == 5
    assert q["simulation"]["test"] == "rank_sum" and q["effect"] == {}


def test_integral_float_counts_are_integers() -> None:
    q = load_question(
        {
            "design": "two_means",
            "find": "power",
            "sample_size": {"per_arm": [30.0, 30]},
            "effect": {"difference": 0.5, "sd": 1.0},
        }
    )
    assert q["sample_size"]["per_arm"] == [30, 30]
    assert all(type(n) is int for n in q["sample_size"]["per_arm"])


def test_every_design_has_a_working_default_formula_and_test() -> None:
    for design in DESIGN_NAMES:
        assert FORMULAS[design] and TESTS[design]


def test_normalized_question_loads_again_unchanged() -> None:
    raws = [
        {"design": "anova_oneway", "effect": {"group_means": [1.0, 2.0, 4.0], "sd": 2.0}},
        SURV,
        {
            "design": "one_mean",
            "find": "power",
            "sample_size": {"per_arm": [40]},
            "effect": {"difference": 5.0, "sd": 15.0},
        },
        {"design": "paired_mean", "effect": {"difference": 1.0, "sd": 2.0, "correlation": 0.5}},
    ]
    for raw in raws:
        q = load_question(raw)
        assert load_question(q) == q
