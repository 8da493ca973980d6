"""Happy-path normalization: what was entered is kept, every default is filled (VOCAB §1, §3;
DEVELOPERS.md, "The question")."""

from __future__ import annotations

import pytest

from service.engine import designs
from service.schemas import QuestionSchema, load_question
from service.schemas.resolve import split_total
from tests.posted import SURV

TWO = {"outcome": "continuous", "layout": "two_groups"}


def test_defaults_filled_for_a_minimal_question() -> None:
    q = load_question({**TWO, "effect": {"difference": 0.5}, "assumptions": {"sd": 1.0}})
    assert q == {
        "outcome": "continuous",
        "layout": "two_groups",
        "analysis": "pooled_t",
        "find": "sample_size",
        "alpha": 0.05,
        "alternative": "two-sided",
        "target_power": 0.80,  # common practice, no source (DEVELOPERS.md default)
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "analysis_options": {},
        "hypothesis": {"aim": "superiority", "margin": None, "higher_is_better": True},
        "allocation_ratio": 1.0,
        "allocation_rounding": "each_group",
        "sample_size": None,
        "adjustments": {"dropout": 0.0, "cluster": None, "comparisons": 1},
        "method": "analytic",
        "simulation": None,
    }


def test_schema_load_and_load_question_agree() -> None:
    raw = {"outcome": "association", "layout": "single_group", "effect": {"r": 0.3}}
    assert QuestionSchema().load(raw) == load_question(raw)


def test_unequal_sds_default_to_welch() -> None:
    q = load_question(
        {
            **TWO,
            "effect": {"difference": 1.0},
            "assumptions": {"sd_control": 1.0, "sd_treatment": 2.0},
        }
    )
    assert q["analysis"] == "welch_t"
    assert q["assumptions"] == {"sd_control": 1.0, "sd_treatment": 2.0}


def test_paired_sd_and_correlation_are_kept_as_entered() -> None:
    # VOCAB §3: the normalized form keeps sd + correlation; sd_difference is derived by the engine
    q = load_question(
        {
            "outcome": "continuous",
            "layout": "paired",
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1.0, "correlation": 0.7},
        }
    )
    assert q["assumptions"] == {"sd": 1.0, "correlation": 0.7} and q["analysis"] == "t_test"


def test_group_means_are_kept_and_cohens_f_is_not_added() -> None:
    means = [120.0, 115.0, 112.0]
    q = load_question(
        {
            "outcome": "continuous",
            "layout": "k_groups",
            "effect": {"group_means": means},
            "assumptions": {"sd": 15.0},
        }
    )
    assert q["effect"] == {"group_means": means} and q["assumptions"] == {"sd": 15.0}
    assert q["analysis"] == "f_test"


def test_cohens_f_and_group_count_are_kept() -> None:
    q = load_question(
        {
            "outcome": "continuous",
            "layout": "k_groups",
            "effect": {"cohens_f": 0.25},
            "assumptions": {"group_count": 4},
        }
    )
    assert q["effect"] == {"cohens_f": 0.25} and q["assumptions"] == {"group_count": 4}


def test_survival_keeps_the_median_and_its_time_unit() -> None:
    q = load_question(SURV)  # control median 12 months
    assert q["assumptions"] == {
        "time_unit": "months",
        "control_median": 12.0,
        "accrual": 24.0,
        "follow_up": 12.0,
        "loss_hazard": 0.0,
    }
    assert q["analysis"] == "logrank"
    assert q["analysis_options"] == {"events_formula": "schoenfeld"}


def test_survival_control_hazard_is_kept() -> None:
    q = load_question(
        {
            **SURV,
            "assumptions": {
                "time_unit": "years",
                "control_hazard": 0.05,
                "accrual": 12,
                "follow_up": 0,
            },
        }
    )
    assert q["assumptions"]["control_hazard"] == 0.05
    assert "control_median" not in q["assumptions"]


def test_proportions_and_correlation_defaults() -> None:
    p = load_question(
        {
            "outcome": "binary",
            "layout": "two_groups",
            "effect": {"p_treatment": 0.10},
            "assumptions": {"p_control": 0.05},
        }
    )
    assert p["analysis_options"] == {"continuity_correction": False}
    assert p["analysis"] == "pooled_z"
    r = load_question({"outcome": "association", "layout": "single_group", "effect": {"r": 0.3}})
    assert r["assumptions"] == {"r_null": 0.0} and r["allocation_ratio"] == 1.0


def test_binary_against_a_margin_defaults_to_the_score_test() -> None:
    q = load_question(
        {
            "outcome": "binary",
            "layout": "two_groups",
            "effect": {"p_treatment": 0.85},
            "assumptions": {"p_control": 0.85},
            "hypothesis": {"aim": "noninferiority", "margin": -0.1},
        }
    )
    assert q["analysis"] == "score" and q["alternative"] == "one-sided" and q["alpha"] == 0.025


@pytest.mark.parametrize("aim, margin", [("noninferiority", -0.05), ("equivalence", 0.05)])
def test_margin_hypotheses_are_one_sided(aim: str, margin: float) -> None:
    # Chow, Shao & Wang (2008), ch. 3 (NI and TOST): sigma 0.1, margin 0.05, one-sided alpha .05
    q = load_question(
        {
            **TWO,
            "alpha": 0.05,
            "hypothesis": {"aim": aim, "margin": margin},
            "effect": {"difference": 0.05 if aim == "noninferiority" else 0.0},
            "assumptions": {"sd": 0.1},
        }
    )
    assert q["alternative"] == "one-sided" and q["hypothesis"] == {
        "aim": aim,
        "margin": margin,
        "higher_is_better": True,
    }


def test_find_power_keeps_n_and_drops_target() -> None:
    q = load_question(
        {
            **TWO,
            "find": "power",
            "sample_size": {"per_group": [30, 30]},
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1.0},
        }
    )
    assert q["sample_size"] == {"per_group": [30, 30]} and q["target_power"] is None


def test_find_effect_has_no_solved_field() -> None:
    q = load_question(
        {
            "outcome": "binary",
            "layout": "two_groups",
            "find": "effect",
            "sample_size": {"total": 200},
            "assumptions": {"p_control": 0.3},
        }
    )
    assert q["effect"] == {} and q["target_power"] == 0.8
    assert q["sample_size"] == {"per_group": [100, 100]}


@pytest.mark.parametrize(
    "total, weights, expected",
    [
        # common practice, no source: Hamilton's largest-remainder method, worked by hand
        (61, [1, 2], [20, 41]),  # quotas 20.33, 40.67
        (100, [1, 1], [50, 50]),
        (101, [1, 1], [51, 50]),  # tie on .5: control (first group) gets the extra one
        (10, [1, 1, 1], [4, 3, 3]),  # quotas 3.33 each; ties go to the earlier groups
        (7, [1, 1.5], [3, 4]),  # quotas 2.8, 4.2
    ],
)
def test_split_total_largest_remainders(total: int, weights: list, expected: list) -> None:
    assert split_total(total, weights) == expected and sum(expected) == total


def test_total_split_by_allocation_in_question() -> None:
    # formula: noncentral t, Cohen (1988) eq. 2.3.1: allocation 2:1 on d = 0.5 gives 48 / 96 per
    # group, 144 in total
    q = load_question(
        {
            **TWO,
            "find": "power",
            "allocation_ratio": 2.0,
            "sample_size": {"total": 144},
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1.0},
        }
    )
    assert q["sample_size"] == {"per_group": [48, 96]}


def test_k_groups_total_split_equally() -> None:
    q = load_question(
        {
            "outcome": "continuous",
            "layout": "k_groups",
            "find": "power",
            "sample_size": {"total": 160},
            "effect": {"cohens_f": 0.25},
            "assumptions": {"group_count": 4},
        }
    )
    assert q["sample_size"] == {"per_group": [40, 40, 40, 40]}


def test_find_effect_by_simulation_without_a_data_model_loads() -> None:
    q = load_question(
        {
            **TWO,
            "find": "effect",
            "method": "simulation",
            "sample_size": {"per_group": [64, 64]},
            "assumptions": {"sd": 1.0},
            "simulation": {"replicates": 2000, "seed": 7},
        }
    )
    assert q["find"] == "effect" and q["method"] == "simulation"
    assert q["effect"] == {} and q["assumptions"] == {"sd": 1.0}  # difference is solved for
    assert q["simulation"]["data"] is None and q["simulation"]["seed"] == 7
    assert q["sample_size"] == {"per_group": [64, 64]} and q["target_power"] == 0.8


def test_simulation_defaults_and_seed_none() -> None:
    q = load_question(
        {**TWO, "method": "simulation", "effect": {"difference": 0.5}, "assumptions": {"sd": 1.0}}
    )
    assert q["analysis"] == "pooled_t"
    assert q["simulation"] == {
        "replicates": 10000,
        "seed": None,
        "data": None,
        "decision_rule": "point",
        "chunk_size": 1000,
        "search_replicates": 2000,
    }


def test_a_simulation_only_analysis_defaults_the_method_to_simulation() -> None:
    q = load_question(
        {
            "outcome": "continuous",
            "layout": "paired",
            "analysis": "signed_rank",
            "effect": {"difference": 0.5},
            "assumptions": {"sd_difference": 1.0},
        }
    )
    assert q["method"] == "simulation" and q["simulation"]["replicates"] == 10000


def test_ranks_with_only_a_data_model_default_to_simulation() -> None:
    dist = {"family": "lognormal", "mu": 0.0, "sigma": 1.0}
    q = load_question(
        {
            "outcome": "ordinal",
            "layout": "two_groups",
            "simulation": {"seed": 5, "data": {"control": dist, "treatment": dict(dist, mu=0.5)}},
        }
    )
    assert q["method"] == "simulation" and q["simulation"]["seed"] == 5
    assert q["analysis"] == "rank_sum" and q["effect"] == {}


def test_integral_float_counts_are_integers() -> None:
    q = load_question(
        {
            **TWO,
            "find": "power",
            "sample_size": {"per_group": [30.0, 30]},
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1.0},
        }
    )
    assert q["sample_size"]["per_group"] == [30, 30]
    assert all(type(n) is int for n in q["sample_size"]["per_group"])


def test_every_cell_offers_analyses_each_with_a_method() -> None:
    for design in designs.all():
        assert design.analyses
        assert all(a.methods for a in design.analyses)


def test_normalized_question_loads_again_unchanged() -> None:
    raws = [
        {
            "outcome": "continuous",
            "layout": "k_groups",
            "effect": {"group_means": [1.0, 2.0, 4.0]},
            "assumptions": {"sd": 2.0},
        },
        SURV,
        {
            "outcome": "continuous",
            "layout": "single_group",
            "find": "power",
            "sample_size": {"per_group": [40]},
            "effect": {"difference": 5.0},
            "assumptions": {"sd": 15.0},
        },
        {
            "outcome": "continuous",
            "layout": "paired",
            "effect": {"difference": 1.0},
            "assumptions": {"sd": 2.0, "correlation": 0.5},
        },
    ]
    for raw in raws:
        q = load_question(raw)
        assert load_question(q) == q
