"""The engine's entry point, end to end: reference answers, adjustment order, records, seeds."""

import copy
import json
import math

import pytest

from service.engine import (
    BudgetExceeded,
    EngineError,
    QuestionError,
    canonical_json,
    compute,
    draw_seed,
    estimate_cost,
    verify,
)
from tests.engine.questions import make_q

# --- analytic answers through the whole pipeline ------------------------------------------


def test_two_groups_reference_answer():
    # published 64: Cohen 1988, Table 2.4.1 (d = 0.5, two-sided .05, power .80); recomputed
    record = compute(
        make_q(
            "continuous",
            "two_groups",
            effect={"difference": 0.5},
            assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        )
    )
    assert record["sample_size"]["per_group"] == [64, 64]
    assert record["sample_size"]["total"] == 128
    base = [s for s in record["sample_size"]["steps"] if s["step"] == "base"][0]
    assert base["per_group_raw"][0] == pytest.approx(63.77, abs=0.01)
    assert record["power"]["estimate"] >= 0.8
    assert record["power"]["mcse"] is None
    assert record["method"]["method"] == "analytic"


def test_adjustments_in_order_cluster_then_dropout():
    # formula: dropout 0.2 leaves clusters of 16 analyzed, Donner & Klar (2000) design effect
    # 1 + (16 − 1)·0.05 = 1.75; whole clusters of 20 enrolled; the count is the smallest k whose
    # cluster-level noncentral t (df 2k − 2, direct scipy) reaches .80
    from scipy import stats

    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        adjustments={"dropout": 0.2, "cluster": {"mean_size": 20, "icc": 0.05}, "comparisons": 1},
    )
    record = compute(q)
    names = [s["step"] for s in record["sample_size"]["steps"]]
    assert names == ["base", "dropout", "design_effect", "cluster_df", "enrolled"]
    de = record["sample_size"]["steps"][2]
    assert de["factor"] == pytest.approx(1.75)

    def power(k):
        ncp = 0.5 / math.sqrt(1.75 / 16 * 2 / k)
        crit = stats.t.isf(0.025, 2 * k - 2)
        return stats.nct.sf(crit, 2 * k - 2, ncp) + stats.nct.cdf(-crit, 2 * k - 2, ncp)

    k = next(k for k in range(2, 100) if power(k) >= 0.8)
    assert record["sample_size"]["clusters_per_group"] == [k, k]
    assert record["sample_size"]["per_group"] == [20 * k, 20 * k]


def test_bonferroni_split_comes_first():
    # formula: Bonferroni alpha / k; with k = 2 the solve uses alpha 0.025 (noncentral t, checked
    # against statsmodels TTestIndPower in the design tests)
    from statsmodels.stats.power import TTestIndPower

    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        adjustments={"comparisons": 2},
    )
    record = compute(q)
    first = record["sample_size"]["steps"][0]
    assert first["step"] == "bonferroni"
    assert first["alpha_per_comparison"] == pytest.approx(0.025)
    expected = TTestIndPower().solve_power(effect_size=0.5, alpha=0.025, power=0.8)
    assert record["sample_size"]["per_group"][0] == int(-(-expected // 1))


def test_find_power_removes_dropout_before_computing():
    # formula: 75 enrolled with 15% dropout leave 63.75 analyzed; power from the noncentral t
    # (statsmodels TTestIndPower as the reference library)
    from statsmodels.stats.power import TTestIndPower

    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        per_group=[75, 75],
        adjustments={"dropout": 0.15},
    )
    record = compute(q)
    analyzed = record["sample_size"]["analyzed_per_group"][0]
    assert analyzed == pytest.approx(63.75)
    expected = TTestIndPower().power(effect_size=0.5, nobs1=analyzed, alpha=0.05)
    assert record["power"]["estimate"] == pytest.approx(expected, abs=1e-6)


def test_find_effect_reaches_target_power():
    # formula: at n = 64 per group the detectable d at 80% power is just under 0.5 (Cohen 1988,
    # Table 2.4.1 gives n = 64 for d = 0.5); statsmodels TTestIndPower solves the same
    from statsmodels.stats.power import TTestIndPower

    q = make_q(
        "continuous",
        "two_groups",
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        find="effect",
        per_group=[64, 64],
    )
    record = compute(q)
    expected = TTestIndPower().solve_power(nobs1=64, alpha=0.05, power=0.8)
    assert record["effect"]["field"] == "difference"
    assert record["effect"]["value"] == pytest.approx(expected, abs=1e-3)
    assert record["power"]["estimate"] == pytest.approx(0.8, abs=1e-3)


# --- the record ---------------------------------------------------------------------------


def test_record_is_sealed_and_canonical():
    record = compute(
        make_q("association", "single_group", effect={"r": 0.3}, assumptions={"r_null": 0.0})
    )
    assert verify(record)
    tampered = copy.deepcopy(record)
    tampered["sample_size"]["per_group"] = [80]
    assert not verify(tampered)
    assert json.loads(canonical_json(record)) == record
    assert record["cautions"] and "statistician" in " ".join(record["cautions"])
    assert set(record["reproducibility"]["versions"]) == {"numpy", "scipy", "sizewise"}


def test_record_has_no_clock_time():
    a = canonical_json(
        compute(
            make_q("association", "single_group", effect={"r": 0.3}, assumptions={"r_null": 0.0})
        )
    )
    b = canonical_json(
        compute(
            make_q("association", "single_group", effect={"r": 0.3}, assumptions={"r_null": 0.0})
        )
    )
    assert a == b


def test_question_is_not_mutated():
    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
    )
    before = copy.deepcopy(q)
    compute(q)
    assert q == before


# --- simulation through the entry point ---------------------------------------------------


def _sim_question(**sim):
    return make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        per_group=[30, 30],
        simulation={"replicates": 4000, **sim},
    )


def test_simulated_power_matches_exact_and_is_reproducible():
    # formula: noncentral t power at d = 0.5, n = 30 per group is 0.4779 (recomputed with statsmodels TTestIndPower);
    # Morris, White & Crowther (2019): within 4 MCSE
    a = compute(_sim_question())
    b = compute(_sim_question())
    assert canonical_json(a) == canonical_json(b)
    power = a["power"]
    assert abs(power["estimate"] - 0.4779) <= 4 * power["mcse"]
    assert power["analytic"] == pytest.approx(0.4779, abs=1e-3)
    assert a["type_i_error"] is not None and a["reproducibility"]["seed"] == 20261201


def test_different_seed_gives_different_digits():
    a = compute(_sim_question(seed=1))
    b = compute(_sim_question(seed=2))
    assert (
        a["power"]["estimate"] != b["power"]["estimate"] or a["type_i_error"] != b["type_i_error"]
    )


def test_progress_and_cancel_hooks():
    from service.engine import Cancelled

    seen = []
    compute(_sim_question(), progress=seen.append)
    assert seen and seen[-1] == 1.0 and all(0 <= f <= 1 for f in seen)
    assert seen == sorted(seen)
    with pytest.raises(Cancelled):
        compute(_sim_question(), cancel=lambda: True)


def test_budget_refuses_with_the_estimate():
    q = _sim_question()
    estimate = estimate_cost(q)
    assert estimate > 0
    with pytest.raises(BudgetExceeded) as info:
        compute(q, budget=estimate - 1)
    assert f"{estimate:,}" in str(info.value)
    assert info.value.field == "simulation.replicates"


def test_simulation_without_seed_is_a_question_error():
    q = _sim_question(seed=None)
    with pytest.raises(QuestionError) as info:
        compute(q)
    assert info.value.field == "simulation.seed"


def test_unknown_cell_is_a_question_error_listing_the_cells():
    q = make_q("continuous", "two_groups")
    q["layout"] = "three_groups"
    with pytest.raises(QuestionError) as info:
        compute(q)
    assert info.value.field == "layout" and '"continuous × two_groups"' in info.value.message
    q["outcome"] = "waveform"
    with pytest.raises(QuestionError) as info:
        compute(q)
    assert info.value.field == "outcome" and '"binary × two_groups"' in info.value.message


def test_an_analysis_the_method_cannot_honor_is_refused_naming_the_offered_ones():
    q = make_q("continuous", "single_group", analysis="signed_rank")
    with pytest.raises(QuestionError) as info:
        compute(q)
    assert info.value.field == "analysis"
    assert "analytic" in info.value.message and "t_test" in info.value.message


def test_numeric_failure_is_typed():
    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
    )
    q["effect"]["sd_control"] = "not a number"  # bypasses the schema on purpose
    with pytest.raises(EngineError):
        compute(q)


def test_draw_seed_range():
    seeds = {draw_seed() for _ in range(50)}
    assert len(seeds) == 50 and all(0 <= s < 2**53 for s in seeds)


def test_hook_exceptions_reach_the_caller_unchanged():
    class LeaseLost(RuntimeError):
        pass

    def progress(_fraction):
        raise LeaseLost("another worker owns this job")

    with pytest.raises(LeaseLost):
        compute(_sim_question(), progress=progress)
