"""Sensitivity grids and the robustness panel, checked against single compute() calls and scipy."""

import copy
import math

import pytest
from scipy import stats
from statsmodels.stats.power import TTestIndPower

from service.engine import QuestionError, compute
from service.engine.explore import DEPARTURES, MAX_CELLS, robustness, sensitivity
from tests.engine.questions import make_q

D_HALF = {"difference": 0.5}  # d = 0.5 with both SDs 1
SDS = {"sd_control": 1.0, "sd_treatment": 1.0}


def _cell(result: dict, **values) -> dict:
    return next(c for c in result["cells"] if c["values"] == values)


# --- sensitivity ---------------------------------------------------------------------------


def test_cells_equal_single_compute_calls():
    q = make_q(
        "continuous", "two_groups", effect=D_HALF, assumptions=SDS, adjustments={"dropout": 0.1}
    )
    grid = {"effect.difference": [0.4, 0.5, 0.8], "assumptions.sd_control": [1.0, 1.2]}
    result = sensitivity(q, grid)
    assert result["shape"] == [3, 2] and len(result["cells"]) == 6
    for cell in result["cells"]:
        single = copy.deepcopy(q)
        single["effect"]["difference"] = cell["values"]["effect.difference"]
        single["assumptions"]["sd_control"] = cell["values"]["assumptions.sd_control"]
        record = compute(single)
        assert cell["per_group"] == record["sample_size"]["per_group"]
        assert cell["total"] == record["sample_size"]["total"]
        assert cell["power"] == record["power"]["estimate"]
    # the grid's last axis varies fastest
    assert [c["values"]["assumptions.sd_control"] for c in result["cells"][:2]] == [1.0, 1.2]


def test_reference_cells():
    q = make_q("continuous", "two_groups", effect=D_HALF, assumptions=SDS)
    result = sensitivity(
        q, {"effect.difference": [0.2, 0.5, 0.8], "adjustments.dropout": [0.0, 0.2]}
    )
    # published 394 (ceil; Cohen prints 393 nearest), 64, 26: Cohen 1988, Table 2.4.1, recomputed
    assert _cell(result, **{"effect.difference": 0.2, "adjustments.dropout": 0.0})["per_group"] == [
        394,
        394,
    ]
    assert _cell(result, **{"effect.difference": 0.5, "adjustments.dropout": 0.0})["per_group"] == [
        64,
        64,
    ]
    assert _cell(result, **{"effect.difference": 0.8, "adjustments.dropout": 0.0})["per_group"] == [
        26,
        26,
    ]
    # common practice, no source: 20% dropout on 64 -> 64 / 0.8 = 80
    assert _cell(result, **{"effect.difference": 0.5, "adjustments.dropout": 0.2})["per_group"] == [
        80,
        80,
    ]
    assert result["base"]["per_group"] == [64, 64]


def test_monotone_in_effect_sd_and_dropout():
    q = make_q("continuous", "two_groups", effect=D_HALF, assumptions=SDS)
    diffs = [0.3, 0.4, 0.5, 0.6, 0.8]
    sds = [0.8, 1.0, 1.2, 1.5]
    drops = [0.0, 0.1, 0.2, 0.3]
    result = sensitivity(
        q, {"effect.difference": diffs, "assumptions.sd": sds, "adjustments.dropout": drops}
    )
    assert len(result["cells"]) == len(diffs) * len(sds) * len(drops)
    n = {tuple(c["values"].values()): c["per_group"][0] for c in result["cells"]}
    for s in sds:
        for q_ in drops:
            col = [n[(d, s, q_)] for d in diffs]
            assert col == sorted(col, reverse=True)  # larger difference, fewer needed
    for d in diffs:
        for q_ in drops:
            col = [n[(d, s, q_)] for s in sds]
            assert col == sorted(col)  # larger SD, more needed
        for s in sds:
            col = [n[(d, s, q_)] for q_ in drops]
            assert col == sorted(col)  # more dropout, more enrolled
    # "assumptions.sd" moves both SDs: d = 0.5 with SD 1.2 equals d = 0.5/1.2 with SD 1
    # (formula: the noncentral t depends on d = Δ/σ only; statsmodels agrees)
    raw = TTestIndPower().solve_power(effect_size=0.5 / 1.2, alpha=0.05, power=0.8)
    assert n[(0.5, 1.2, 0.0)] == math.ceil(raw)


def test_power_questions_give_monotone_power():
    q = make_q("continuous", "two_groups", effect=D_HALF, assumptions=SDS, per_group=[30, 30])
    result = sensitivity(q, {"effect.difference": [0.3, 0.5, 0.7]})
    powers = [c["power"] for c in result["cells"]]
    assert powers == sorted(powers)
    # formula: noncentral t power at d = 0.5, n = 30 per group = 0.4779 (statsmodels agrees)
    assert powers[1] == pytest.approx(
        TTestIndPower().power(effect_size=0.5, nobs1=30, alpha=0.05), abs=1e-9
    )
    assert {tuple(c["per_group"]) for c in result["cells"]} == {(30, 30)}


def test_survival_grid_over_hazard_ratio():
    # HR 0.75, control median 12 (hazard ln 2 / 12), accrual 24, follow-up 12
    q = make_q("time_to_event", "two_groups")
    result = sensitivity(q, {"effect.hazard_ratio": [0.5, 0.75, 0.8]})
    totals = [c["total"] for c in result["cells"]]
    assert totals == sorted(totals)  # a hazard ratio nearer 1 needs more subjects
    assert all(c["error"] is None for c in result["cells"])


def test_cells_the_engine_refuses_are_reported():
    q = make_q("continuous", "two_groups", effect=D_HALF, assumptions=SDS)
    result = sensitivity(q, {"effect.difference": [0.0, 0.5]})
    bad, good = result["cells"]
    assert bad["per_group"] is None and "difference" in bad["error"]
    assert good["per_group"] == [64, 64]


@pytest.mark.parametrize(
    ("question_overrides", "grid", "field", "words"),
    [
        ({"method": "simulation"}, {"effect.difference": [0.5]}, "method", "worker job"),
        ({}, {"effect.colour": [1.0]}, "grid.effect.colour", "allowed: "),
        ({}, {"simulation.seed": [1.0]}, "grid.simulation.seed", "allowed: "),
        ({}, {"effect.difference": []}, "grid.effect.difference", "non-empty list"),
        (
            {},
            {"effect.difference": [0.5, "big"]},
            "grid.effect.difference.1",
            "finite number; got 'big'",
        ),
        (
            {},
            {"effect.difference": [0.5, float("nan")]},
            "grid.effect.difference.1",
            "finite number",
        ),
        ({}, {"effect.difference": [0.5, 0.5]}, "grid.effect.difference", "repeated"),
        ({}, {}, "grid", "non-empty mapping"),
        (
            {},
            {
                "effect.difference": [i / 100 + 0.1 for i in range(30)],
                "assumptions.sd": [1.0 + i / 10 for i in range(20)],
            },
            "grid",
            f"at most {MAX_CELLS}",
        ),
        (
            {},
            {"assumptions.sd": [1.0], "assumptions.sd_control": [1.0]},
            "grid.assumptions.sd",
            "do not combine",
        ),
        (
            {"find": "effect", "sample_size": {"per_group": [30, 30]}},
            {"assumptions.sd": [1.0]},
            "find",
            "'effect'",
        ),
    ],
)
def test_bad_grids_name_the_field(question_overrides, grid, field, words):
    q = make_q("continuous", "two_groups", effect=D_HALF, assumptions=SDS, **question_overrides)
    with pytest.raises(QuestionError) as info:
        sensitivity(q, grid)
    assert info.value.field == field
    assert words in info.value.message


# --- robustness ----------------------------------------------------------------------------

REPS = 600  # modest: the panel's shape and bookkeeping are tested, not its third decimal


@pytest.fixture(scope="module")
def simulated_q():
    return make_q(
        "continuous",
        "two_groups",
        effect=D_HALF,
        assumptions=SDS,
        simulation={"replicates": REPS, "search_replicates": 600},
    )


@pytest.fixture(scope="module")
def panel(simulated_q):
    return robustness(simulated_q, [64, 64], replicates=REPS, seed=20261201)


def test_each_departure_is_declared(panel):
    names = [d["name"] for d in panel["departures"]]
    assert names == list(DEPARTURES)
    assert {"normal", "heavy_tails", "skew_lognormal", "unequal_variance", "cauchy"} <= set(names)
    for d in panel["departures"]:
        assert (
            d["description"] and d["data"]["control"]["family"] and d["data"]["treatment"]["family"]
        )
        assert 0 <= d["power"]["ci95"][0] <= d["power"]["estimate"] <= d["power"]["ci95"][1] <= 1
        assert d["type_i_error"]["replicates"] == REPS and d["null_model"]
    assert panel["per_group"] == [64, 64] and panel["replicates"] == REPS


def test_normal_case_reproduces_the_record(simulated_q, panel):
    q = copy.deepcopy(simulated_q)
    q.update(find="power", target_power=None, sample_size={"per_group": [64, 64]})
    record = compute(q)
    normal = panel["departures"][0]
    assert normal["name"] == "normal"
    assert normal["power"]["estimate"] == record["power"]["estimate"]
    assert normal["type_i_error"]["estimate"] == record["type_i_error"]["estimate"]
    # formula: noncentral t power at 64 per group, d = 0.5 (Cohen 1988, Table 2.4.1 gives .80)
    exact = TTestIndPower().power(effect_size=0.5, nobs1=64, alpha=0.05)
    assert abs(normal["power"]["estimate"] - exact) < 4 * normal["power"]["mcse"]


def _scipy_dist(arm: dict):
    shift = arm.get("shift", 0.0)
    f = arm["family"]
    if f == "normal":
        return stats.norm(arm["mean"], arm["sd"]), 0.0
    if f == "student_t":
        return stats.t(arm["df"], loc=arm["loc"], scale=arm["scale"]), 0.0
    if f == "lognormal":
        return stats.lognorm(arm["sigma"], scale=math.exp(arm["mu"])), shift
    if f == "gamma":
        return stats.gamma(arm["shape"], scale=arm["scale"]), shift
    if f == "cauchy":
        return stats.cauchy(arm["loc"], arm["scale"]), 0.0
    raise AssertionError(f)


def test_departures_keep_the_planned_mean_and_sd(panel):
    # recomputed with scipy.stats: each model has the assumed mean and SD (treatment SD ×2 when
    # unequal); Cauchy has neither, so its interquartile range matches the normal's instead
    for d in panel["departures"]:
        factor = 2.0 if d["name"] == "unequal_variance" else 1.0
        for label, mean, sd in (("control", 0.0, 1.0), ("treatment", 0.5, factor)):
            dist, shift = _scipy_dist(d["data"][label])
            if d["name"] == "cauchy":
                iqr = dist.ppf(0.75) - dist.ppf(0.25)
                assert iqr == pytest.approx(
                    stats.norm(0, sd).ppf(0.75) - stats.norm(0, sd).ppf(0.25)
                )
                assert dist.median() == pytest.approx(mean)
            else:
                assert dist.mean() + shift == pytest.approx(mean, abs=1e-12)
                assert dist.std() == pytest.approx(sd, rel=1e-12)
    skewed = next(d for d in panel["departures"] if d["name"] == "skew_lognormal")
    assert _scipy_dist(skewed["data"]["control"])[0].stats(moments="s") == pytest.approx(
        2.26, abs=0.01
    )


def test_departures_move_power_the_known_way(panel):
    by = {d["name"]: d for d in panel["departures"]}
    # common practice, no source: doubling one SD loses power; Cauchy data ruin the t test
    assert by["unequal_variance"]["power"]["ci95"][1] < by["normal"]["power"]["ci95"][0]
    assert by["cauchy"]["power"]["ci95"][1] < by["normal"]["power"]["ci95"][0]
    # common practice, no source: under a normal null the t test holds its size (about 0.05)
    lo, hi = by["normal"]["type_i_error"]["ci95"]
    assert lo <= 0.05 <= hi


def test_analytic_question_uses_the_planned_analysis():
    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.5},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.5},
        analysis="welch_t",
    )
    result = robustness(q, [40, 40], replicates=200, seed=5)
    assert result["analysis"] == "welch_t"


@pytest.mark.parametrize(
    ("kwargs", "field", "words"),
    [
        ({"per_group": [64]}, "per_group", "two whole numbers"),
        ({"per_group": [64, 1]}, "per_group", "≥ 2"),
        ({"replicates": 10}, "simulation.replicates", "got 10"),
        ({"seed": -1}, "simulation.seed", "got -1"),
    ],
)
def test_bad_robustness_inputs(simulated_q, kwargs, field, words):
    args = {"per_group": [64, 64], "replicates": 200, "seed": 1, **kwargs}
    with pytest.raises(QuestionError) as info:
        robustness(simulated_q, args.pop("per_group"), **args)
    assert info.value.field == field and words in info.value.message


def test_robustness_is_for_continuous_and_ordinal_two_group_cells_only():
    q = make_q(
        "binary",
        "two_groups",
        effect={"p_treatment": 0.6},
        assumptions={"p_control": 0.4},
        analysis_options={"continuity_correction": False},
    )
    with pytest.raises(QuestionError) as info:
        robustness(q, [97, 97], replicates=200, seed=1)
    assert info.value.field == "layout" and "binary × two_groups" in info.value.message
    assert "continuous × two_groups and ordinal × two_groups" in info.value.message


# An invented length-of-stay model (lognormal, as a ward's records might fit); demo data only.
STAY = {
    "control": {"family": "lognormal", "mu": 1.6, "sigma": 0.55},
    "treatment": {"family": "lognormal", "mu": 1.4, "sigma": 0.55},
}


def _rank_sum_power_q(**simulation):
    q = make_q(
        "ordinal",
        "two_groups",
        find="power",
        target_power=None,
        method="simulation",
        per_group=[60, 60],
        analysis="rank_sum",
        simulation={"data": STAY, "replicates": 400, "seed": 11, **simulation},
    )
    q["effect"] = {}  # the data model implies P(Y > X); a different posted value is refused
    return q


def test_rank_sum_panel_starts_with_the_planned_data_and_reproduces_the_record():
    q = _rank_sum_power_q()
    panel = robustness(q, [60, 60], replicates=400, seed=11)
    assert panel["outcome"] == "ordinal" and panel["analysis"] == "rank_sum"
    names = [d["name"] for d in panel["departures"]]
    assert names == ["as_planned", *DEPARTURES]
    record = compute(q)
    planned = panel["departures"][0]
    assert planned["data"] == STAY
    assert planned["power"]["estimate"] == record["power"]["estimate"]
    assert planned["type_i_error"]["estimate"] == record["type_i_error"]["estimate"]


def test_rank_sum_panel_matches_the_planned_mean_and_sd():
    # recomputed with scipy.stats: the normal departure has the lognormal arms' mean and SD
    panel = robustness(_rank_sum_power_q(), [60, 60], replicates=200, seed=2)
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    for label in ("control", "treatment"):
        arm = STAY[label]
        planned = stats.lognorm(arm["sigma"], scale=math.exp(arm["mu"]))
        assert normal["data"][label]["mean"] == pytest.approx(planned.mean(), rel=1e-12)
        assert normal["data"][label]["sd"] == pytest.approx(planned.std(), rel=1e-12)


def test_rank_sum_panel_from_prob_superiority_uses_a_normal_shift():
    # formula: for normal data with SD 1, P(Y > X) = Φ(Δ/√2), so Δ = √2·Φ⁻¹(p) (Noether 1987)
    q = make_q("ordinal", "two_groups", effect={"prob_superiority": 0.64})
    panel = robustness(q, [70, 70], replicates=200, seed=4)
    normal = next(d for d in panel["departures"] if d["name"] == "normal")
    shift = normal["data"]["treatment"]["mean"] - normal["data"]["control"]["mean"]
    assert shift == pytest.approx(math.sqrt(2) * stats.norm.ppf(0.64), rel=1e-12)
    assert [d["name"] for d in panel["departures"]] == list(DEPARTURES)


def test_rank_sum_panel_refuses_arms_without_a_mean():
    data = {
        "control": {"family": "cauchy", "loc": 0.0, "scale": 1.0},
        "treatment": STAY["treatment"],
    }
    with pytest.raises(QuestionError) as info:
        robustness(_rank_sum_power_q(data=data), [60, 60], replicates=200, seed=1)
    assert info.value.field == "simulation.data.control" and "'cauchy'" in info.value.message
