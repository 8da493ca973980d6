"""Simulated find = effect: the smallest effect whose simulated power at n reaches the target.

Each check compares the simulated effect with an outside reference (statsmodels, a published
table) or with the cell's formula, within a tolerance derived from the Monte Carlo error:
the power's standard error √(p(1 − p)/R) carried to the effect scale through the slope of the
power curve (delta method), plus the search's 1% bisection width.
"""

from __future__ import annotations

import copy
import math

import pytest
from statsmodels.stats.power import TTestIndPower

from service.engine import QuestionError, compute, estimate_cost, search
from service.engine.designs import get
from tests.engine.questions import make_q

SEED = 20261201
TARGET = 0.80
NORMAL = {"family": "normal", "mean": 0.0, "sd": 1.0}


def effect_question(cell: tuple, per_group: list[int], replicates: int = 10000, **kw) -> dict:
    """A find = effect simulation question at this file's seed."""
    sim = {"replicates": replicates, "seed": SEED, **kw.pop("simulation", {})}
    return make_q(*cell, find="effect", per_group=per_group, simulation=sim, **kw)


def tolerance(power_at, value: float, origin: float, replicates: int, approx: float = 0.0):
    """Four Monte Carlo SEs of the effect, the 1% bisection width and a formula allowance.

    ``approx`` (in power) covers a reference that is itself a normal approximation.
    """
    h = 1e-5
    slope = abs(power_at(value + h) - power_at(value - h)) / (2 * h)
    se_power = math.sqrt(TARGET * (1 - TARGET) / replicates)
    width = search.EFFECT_TOLERANCE * abs(value - origin)
    return (4 * se_power + approx) / slope + width


def formula_power(q: dict, per_group: list[int]):
    """The cell's formula power as a function of the solved-for effect value."""
    design = get(q["outcome"], q["layout"])
    name = design.solved

    def power_at(value: float) -> float:
        solved = copy.deepcopy(q)
        solved["effect"][name] = value
        return design.power(solved, [float(n) for n in per_group], q["alpha"])

    return power_at


def test_two_groups_d_at_64_per_group_is_half() -> None:
    q = effect_question(("continuous", "two_groups"), [64, 64])
    record = compute(q)
    # Cohen 1988, Table 2.4.1: n = 64 per group for d = 0.5 at power .80, two-sided .05;
    # the reference effect is statsmodels' noncentral t solve at n = 64 (0.4991, recomputed).
    ref = TTestIndPower().solve_power(nobs1=64, power=TARGET, alpha=0.05, ratio=1.0)

    def power_at(d: float) -> float:
        return TTestIndPower().power(effect_size=d, nobs1=64, alpha=0.05, ratio=1.0)

    effect = record["effect"]
    assert effect["field"] == "difference"
    assert abs(effect["value"] - ref) <= tolerance(power_at, ref, 0.0, 10000)
    assert abs(effect["value"] - 0.5) <= tolerance(power_at, ref, 0.0, 10000) + 0.001
    # The answer is the passing end of a bracket narrower than 1% of the effect.
    lo, hi = effect["bracket"]
    assert lo < hi == effect["value"]
    assert hi - lo <= search.EFFECT_TOLERANCE * hi + 1e-12
    assert record["power"]["estimate"] >= TARGET and record["power"]["replicates"] == 10000
    # The formula's power at the simulated effect, beside the simulated one (statsmodels agrees).
    assert record["power"]["analytic"] == pytest.approx(power_at(effect["value"]), abs=1e-6)


def test_effect_search_reports_candidates_on_common_random_numbers() -> None:
    record = compute(effect_question(("continuous", "two_groups"), [64, 64]))
    block = record["search"]
    assert block["field"] == "difference" and block["start_source"] == "analytic"
    assert block["search_replicates"] == 2000 and block["target"] == TARGET
    rows = block["candidates"]
    assert 2 <= len(rows) <= search.EFFECT_STEPS + 8
    for row in rows:
        assert row["replicates"] == 2000
        assert row["mcse"] == pytest.approx(math.sqrt(row["power"] * (1 - row["power"]) / 2000))
    # Common random numbers: every candidate reuses the same streams, so simulated power never
    # falls as the effect grows (per replicate, the t statistic increases with the difference).
    ordered = sorted(rows, key=lambda r: r["effect"])
    powers = [r["power"] for r in ordered]
    assert powers == sorted(powers)
    confirmed = {round(r["effect"], 12): r for r in block["confirmation"]}
    assert confirmed[round(record["effect"]["value"], 12)]["replicates"] == 10000


def test_type_i_error_is_checked_at_the_given_n() -> None:
    record = compute(effect_question(("continuous", "two_groups"), [64, 64]))
    t1 = record["type_i_error"]
    # A test that holds its level rejects a true null at alpha: within 4 Monte Carlo SEs of 0.05 (formula).
    assert t1["replicates"] == 10000 and t1["alpha"] == 0.05
    assert abs(t1["estimate"] - 0.05) <= 4 * math.sqrt(0.05 * 0.95 / 10000)
    assert "difference 0" in t1["null_model"]
    assert record["sample_size"]["per_group"] == [64, 64]


@pytest.mark.parametrize(
    "cell, per_group, assumptions, approx",
    [
        # p = .40 vs .60 needs 96.92 → 97 per group (formula, pooled normal approximation;
        # Fleiss, Levin & Paik 2003); the simulated z test is exact, so allow 0.01 in power (from memory:
        # the approximation is within a point of power here).
        (("binary", "two_groups"), [97, 97], {"p_control": 0.4}, 0.01),
        # r = 0.3 needs 85 pairs (Cohen 1988, Table 3.4.1; Fisher z, recomputed); the simulated
        # Pearson test is exact, the formula approximate: same allowance.
        (("association", "single_group"), [85], None, 0.01),
    ],
)
def test_simulated_effect_agrees_with_the_formula(cell, per_group, assumptions, approx) -> None:
    q = effect_question(cell, per_group, assumptions=assumptions)
    record = compute(q)
    analytic = get(*cell).solve_effect(q, [float(n) for n in per_group], 0.05)
    got = record["effect"]
    assert got["field"] == analytic["field"] and got["analytic"] == pytest.approx(analytic["value"])
    origin = q["assumptions"].get("p_control", q["assumptions"].get("r_null", 0.0))
    tol = tolerance(formula_power(q, per_group), analytic["value"], origin, 10000, approx)
    assert abs(got["value"] - analytic["value"]) <= tol
    assert record["power"]["estimate"] >= TARGET


@pytest.mark.parametrize(
    "cell, per_group, origin, approx",
    [
        # d = 0.5 needs 33.37 → 34 (formula: noncentral t): exact in simulation.
        (("continuous", "single_group"), [34], 0.0, 0.0),
        (("continuous", "paired"), [34], 0.0, 0.0),
        # f = 0.25, k = 3 needs 52.40 → 53 per group (Cohen 1988, Table 8.4.4; recomputed).
        (("continuous", "k_groups"), [53, 53, 53], 0.0, 0.0),
        # P(Y > X) = 0.6382 needs N = 137.06 (Noether 1987, formula): an approximation.
        (("ordinal", "two_groups"), [69, 69], 0.5, 0.01),
        # HR 0.75 with 24 accrual + 12 follow-up needs 559 in all (Schoenfeld 1983, formula).
        (("time_to_event", "two_groups"), [280, 280], 1.0, 0.01),
    ],
)
def test_other_cells_agree_with_their_formulas(cell, per_group, origin, approx) -> None:
    q = effect_question(cell, per_group, replicates=4000)
    record = compute(q)
    analytic = get(*cell).solve_effect(q, [float(n) for n in per_group], 0.05)
    assert record["effect"]["field"] == analytic["field"]
    tol = tolerance(formula_power(q, per_group), analytic["value"], origin, 4000, approx)
    assert abs(record["effect"]["value"] - analytic["value"]) <= tol
    if cell == ("time_to_event", "two_groups"):
        assert record["effect"]["value"] < 1 and record["events"]["simulated"]["replicates"] == 4000


def test_lower_is_better_searches_below_the_null() -> None:
    q = effect_question(("continuous", "two_groups"), [64, 64], replicates=4000)
    q["hypothesis"]["higher_is_better"] = False
    value = compute(q)["effect"]["value"]
    # Two-sided t power is symmetric in d (formula), so the answer mirrors d = 0.4991.
    ref = TTestIndPower().solve_power(nobs1=64, power=TARGET, alpha=0.05, ratio=1.0)

    def power_at(d: float) -> float:
        return TTestIndPower().power(effect_size=d, nobs1=64, alpha=0.05, ratio=1.0)

    assert value < 0 and abs(-value - ref) <= tolerance(power_at, ref, 0.0, 4000)


def test_noninferiority_effect_is_measured_from_the_margin() -> None:
    q = effect_question(
        ("continuous", "two_groups"),
        [50, 50],
        replicates=4000,
        hypothesis={"aim": "noninferiority", "margin": -0.3},
    )
    record = compute(q)
    analytic = get("continuous", "two_groups").solve_effect(q, [50.0, 50.0], 0.05)["value"]
    tol = tolerance(formula_power(q, [50, 50]), analytic, -0.3, 4000)
    assert abs(record["effect"]["value"] - analytic) <= tol
    assert "margin" in record["type_i_error"]["null_model"]


def test_same_seed_gives_the_identical_record() -> None:
    q = effect_question(
        ("binary", "two_groups"), [97, 97], replicates=2000, assumptions={"p_control": 0.4}
    )
    first, second = compute(q), compute(copy.deepcopy(q))
    assert first == second
    assert first["reproducibility"]["record_sha256"] == second["reproducibility"]["record_sha256"]
    other = copy.deepcopy(q)
    other["simulation"]["seed"] = SEED + 1
    assert compute(other)["search"]["candidates"] != first["search"]["candidates"]


def test_dropout_is_removed_before_the_search() -> None:
    q = effect_question(
        ("continuous", "two_groups"), [80, 80], replicates=2000, adjustments={"dropout": 0.2}
    )
    record = compute(q)
    assert record["sample_size"]["analyzed_per_group"] == pytest.approx([64.0, 64.0])
    assert record["power"]["replicates"] == 2000
    assert record["effect"]["analytic"] == pytest.approx(
        TTestIndPower().solve_power(nobs1=64, power=TARGET, alpha=0.05, ratio=1.0), abs=1e-6
    )


def test_a_posted_data_model_is_refused_on_simulation_data() -> None:
    q = effect_question(
        ("continuous", "two_groups"),
        [64, 64],
        replicates=2000,
        simulation={"data": {"control": NORMAL, "treatment": dict(NORMAL, mean=0.5)}},
    )
    for call in (compute, estimate_cost):
        with pytest.raises(QuestionError) as info:
            call(q)
        assert info.value.field == "simulation.data"
        assert "no single effect parameter" in info.value.message


def test_an_unreachable_target_names_the_sample_size() -> None:
    # Two per group: the rank-sum z cannot pass 1.96 (|U − 2| ≤ 2 over SD √(20/12); formula).
    q = effect_question(("ordinal", "two_groups"), [2, 2], replicates=2000)
    with pytest.raises(QuestionError) as info:
        compute(q)
    assert info.value.field == "sample_size.per_group"
    assert "[2, 2]" in info.value.message and "0.8" in info.value.message


def test_cost_estimate_covers_the_runs_made() -> None:
    q = effect_question(("continuous", "two_groups"), [64, 64], replicates=2000)
    record = compute(q)
    block = record["search"]
    # search runs, then the confirmation pair, its moves and the type I check at full replicates
    runs = sum(r["replicates"] for r in block["candidates"]) + (3 + block["moves"]) * 2000
    # Sufficient statistics: two draws (mean, variance) per group per replicate (formula).
    assert estimate_cost(q) >= runs * 4


def test_one_sided_logrank_searches_a_hazard_ratio_below_one() -> None:
    # Longer times to the event are better by default, so a one-sided search looks below 1 and
    # lands near the Schoenfeld (1983) one-sided answer (formula).
    q = effect_question(("time_to_event", "two_groups"), [280, 280], replicates=4000)
    q["alternative"] = "one-sided"
    record = compute(q)
    analytic = get("time_to_event", "two_groups").solve_effect(q, [280.0, 280.0], 0.05)
    assert 0 < record["effect"]["value"] < 1 and 0 < analytic["value"] < 1
    tol = tolerance(formula_power(q, [280, 280]), analytic["value"], 1.0, 4000, 0.01)
    assert abs(record["effect"]["value"] - analytic["value"]) <= tol
    assert not any("above 1" in w for w in record["warnings"])
