"""Analytic two-sample, one-sample and paired t designs checked against published tables and statsmodels."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.power import TTestIndPower, TTestPower

from service.engine.designs import get
from service.engine.errors import QuestionError
from tests.engine.questions import answer, make_q

# --- two independent means -------------------------------------------------------------------


@pytest.mark.parametrize(
    ("d", "power", "raw", "ceil"),
    [
        (0.2, 0.80, 393.41, 394),  # Cohen 1988, Table 2.4.1 prints 393 (nearest); recomputed
        (0.5, 0.80, 63.77, 64),  # Cohen 1988, Table 2.4.1 prints 64; recomputed
        (
            0.8,
            0.80,
            25.52,
            26,
        ),  # Cohen 1988, Table 2.4.1 prints 26 (normal approx. gives 25); recomputed
        (0.5, 0.90, 85.03, 86),  # Cohen 1988, Table 2.4.1 prints 85 (nearest); recomputed
    ],
)
def test_two_groups_cohen_table(d, power, raw, ceil):
    q = make_q("continuous", "two_groups", effect={"difference": d}, target_power=power)
    got_raw, got = answer(q)
    assert got_raw[0] == pytest.approx(raw, abs=0.01)
    assert got == [ceil, ceil]


def test_two_groups_allocation_two_to_one():
    # formula: noncentral t with n2 = 2·n1; Cohen 1988 eq. 2.3.1 (harmonic mean 64)
    q = make_q("continuous", "two_groups", allocation_ratio=2.0)
    raw, final = answer(q)
    assert raw[0] == pytest.approx(47.74, abs=0.01)
    assert final == [48, 96]


def test_two_groups_power_at_30_per_group():
    # formula: noncentral t, 0.4779 ; statsmodels TTestIndPower agrees
    q = make_q("continuous", "two_groups")
    got = get("continuous", "two_groups").power(q, [30, 30], 0.05)
    assert got == pytest.approx(0.4779, abs=1e-4)
    assert got == pytest.approx(TTestIndPower().power(0.5, 30, 0.05), abs=1e-6)


@pytest.mark.parametrize("d", [0.15, 0.3, 0.5, 0.8, 1.2])
@pytest.mark.parametrize("ratio", [1.0, 0.5, 2.0, 3.0])
@pytest.mark.parametrize(
    ("alpha", "alternative"), [(0.05, "two-sided"), (0.01, "two-sided"), (0.05, "one-sided")]
)
def test_two_groups_matches_statsmodels(d, ratio, alpha, alternative):
    # statsmodels TTestIndPower (general-purpose library): same noncentral t, nobs2 = ratio·nobs1
    alt = "two-sided" if alternative == "two-sided" else "larger"
    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": d},
        allocation_ratio=ratio,
        alternative=alternative,
        alpha=alpha,
    )
    design = get("continuous", "two_groups")
    n1 = design.solve_n(q, alpha).per_group[0]
    ref_n = TTestIndPower().solve_power(
        d, nobs1=None, alpha=alpha, power=0.8, ratio=ratio, alternative=alt
    )
    assert n1 == pytest.approx(ref_n, rel=1e-4)
    p = design.power(q, [40, 40 * ratio], alpha)
    assert p == pytest.approx(
        TTestIndPower().power(d, 40, alpha, ratio=ratio, alternative=alt), abs=1e-6
    )


@pytest.mark.parametrize("n", [20, 64, 150])
def test_two_groups_solve_effect_matches_statsmodels(n):
    # statsmodels TTestIndPower solved for the effect size at fixed n
    q = make_q("continuous", "two_groups", find="effect")
    got = get("continuous", "two_groups").solve_effect(q, [n, n], 0.05)
    ref = TTestIndPower().solve_power(None, nobs1=n, alpha=0.05, power=0.8)
    assert got["field"] == "difference"
    assert got["value"] == pytest.approx(ref, rel=1e-5)


def test_two_groups_lower_is_better_returns_negative_difference():
    # formula: the two-sided t power is symmetric in the sign of the difference
    q = make_q("continuous", "two_groups", hypothesis={"higher_is_better": False})
    got = get("continuous", "two_groups").solve_effect(q, [64, 64], 0.05)
    ref = TTestIndPower().solve_power(None, nobs1=64, alpha=0.05, power=0.8)
    assert got["value"] == pytest.approx(-ref, rel=1e-5)


def test_welch_equal_sds_and_arms_equals_student():
    # formula: Satterthwaite df is n1 + n2 − 2 exactly when SDs and arms are equal
    q = make_q("continuous", "two_groups", analysis="welch_t")
    assert get("continuous", "two_groups").solve_n(q, 0.05).per_group[0] == pytest.approx(
        63.77, abs=0.01
    )


def test_welch_power_against_simulated_welch_test():
    # scipy.stats.ttest_ind(equal_var=False), seeded Monte Carlo; tolerance 4 MCSE (Morris et al. 2019)
    q = make_q(
        "continuous",
        "two_groups",
        analysis="welch_t",
        effect={"difference": 0.6},
        assumptions={"sd_control": 1.0, "sd_treatment": 2.0},
    )
    n1, n2 = 40, 60
    expected = get("continuous", "two_groups").power(q, [n1, n2], 0.05)
    rng = np.random.default_rng(20240611)
    reps = 20000
    x = rng.normal(0.0, 1.0, (reps, n1))
    y = rng.normal(0.6, 2.0, (reps, n2))
    hit = stats.ttest_ind(y, x, axis=1, equal_var=False).pvalue < 0.05
    mcse = math.sqrt(expected * (1 - expected) / reps)
    assert hit.mean() == pytest.approx(expected, abs=4 * mcse)


def test_noninferiority_means_chow_shao_wang():
    # Chow, Shao & Wang 2008, ch. 3 print 13 with z quantiles; the noncentral t answer is 14
    q = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.05},
        assumptions={"sd_control": 0.1, "sd_treatment": 0.1},
        hypothesis={"aim": "noninferiority", "margin": -0.05},
    )
    raw, final = answer(q)
    z_raw = (
        2 * (stats.norm.ppf(0.95) + stats.norm.ppf(0.80)) ** 2 * 0.1**2 / 0.1**2
    )  # formula: 12.37
    assert z_raw == pytest.approx(12.37, abs=0.01)
    assert z_raw < raw[0] < 14
    assert final == [14, 14]
    # statsmodels TTestIndPower, one-sided, standardized distance to the margin (0.05 + 0.05)/0.1
    ref = TTestIndPower().solve_power(1.0, nobs1=None, alpha=0.05, power=0.8, alternative="larger")
    assert raw[0] == pytest.approx(ref, rel=1e-4)


def test_noninferiority_mirrored_when_lower_is_better():
    # formula: mirroring the scale leaves the answer unchanged
    up = make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.05},
        assumptions={"sd_control": 0.1, "sd_treatment": 0.1},
        hypothesis={"aim": "noninferiority", "margin": -0.05},
    )
    down = make_q(
        "continuous",
        "two_groups",
        effect={"difference": -0.05},
        assumptions={"sd_control": 0.1, "sd_treatment": 0.1},
        hypothesis={"aim": "noninferiority", "margin": 0.05, "higher_is_better": False},
    )
    design = get("continuous", "two_groups")
    assert design.solve_n(down, 0.05).per_group[0] == pytest.approx(
        design.solve_n(up, 0.05).per_group[0], rel=1e-9
    )
    eff = design.solve_effect(down, [14, 14], 0.05)
    assert eff["value"] < 0.05  # below the margin, the better side when lower is better
    assert design.power(
        make_q(
            "continuous",
            "two_groups",
            effect={"difference": eff["value"]},
            assumptions={"sd_control": 0.1, "sd_treatment": 0.1},
            hypothesis={"aim": "noninferiority", "margin": 0.05, "higher_is_better": False},
        ),
        [14, 14],
        0.05,
    ) == pytest.approx(0.8, abs=1e-6)


def _tost_q(**effect):
    return make_q(
        "continuous",
        "two_groups",
        effect={"difference": 0.0, "sd_control": 0.1, "sd_treatment": 0.1, **effect},
        hypothesis={"aim": "equivalence", "margin": 0.05},
    )


def test_tost_reference():
    # formula: TOST, normal 68.51 → 69, exact bivariate noncentral t → 70
    normal = 2 * 0.1**2 * (stats.norm.ppf(0.95) + stats.norm.ppf(0.90)) ** 2 / 0.05**2
    assert normal == pytest.approx(68.51, abs=0.01)
    raw, final = answer(_tost_q())
    assert normal < raw[0] < 70
    assert final == [70, 70]


@pytest.mark.parametrize(("delta", "n"), [(0.0, 70), (0.02, 60), (0.01, 25)])
def test_tost_exact_power_against_simulated_tost(delta, n):
    # scipy.stats.ttest_ind one-sided against each bound, seeded Monte Carlo; tolerance 4 MCSE
    q = _tost_q(difference=delta)
    expected = get("continuous", "two_groups").power(q, [n, n], 0.05)
    rng = np.random.default_rng([7, n])
    reps = 20000
    x = rng.normal(0.0, 0.1, (reps, n))
    y = rng.normal(delta, 0.1, (reps, n))
    low = stats.ttest_ind(y + 0.05, x, axis=1, alternative="greater").pvalue < 0.05
    high = stats.ttest_ind(y - 0.05, x, axis=1, alternative="less").pvalue < 0.05
    mcse = math.sqrt(max(expected * (1 - expected), 1e-4) / reps)
    assert (low & high).mean() == pytest.approx(expected, abs=4 * mcse + 1e-3)


def test_tost_solve_effect_round_trip():
    # formula: the solved difference puts the exact TOST power back on the target
    design = get("continuous", "two_groups")
    eff = design.solve_effect(_tost_q(), [100, 100], 0.05)
    assert 0 < eff["value"] < 0.05
    assert design.power(_tost_q(difference=eff["value"]), [100, 100], 0.05) == pytest.approx(
        0.8, abs=1e-6
    )


@pytest.mark.parametrize(
    ("q", "field"),
    [
        (make_q("continuous", "two_groups", effect={"difference": 0.0}), "effect.difference"),
        (
            make_q("continuous", "two_groups", assumptions={"sd_control": 0.0}),
            "assumptions.sd_control",
        ),
        (make_q("continuous", "two_groups", analysis="exact_z"), "analysis"),
        (
            make_q(
                "continuous",
                "two_groups",
                effect={"difference": -0.1},
                hypothesis={"aim": "noninferiority", "margin": -0.05},
            ),
            "effect.difference",
        ),
        (
            make_q(
                "continuous",
                "two_groups",
                effect={"difference": 0.06},
                hypothesis={"aim": "equivalence", "margin": 0.05},
            ),
            "effect.difference",
        ),
        (
            make_q(
                "continuous", "two_groups", hypothesis={"aim": "noninferiority", "margin": None}
            ),
            "hypothesis.margin",
        ),
        (
            make_q("continuous", "single_group", hypothesis={"aim": "equivalence", "margin": 0.1}),
            "hypothesis.aim",
        ),
        (
            make_q("continuous", "paired", assumptions={"sd_difference": -1.0}),
            "assumptions.sd_difference",
        ),
    ],
)
def test_bad_input_names_the_field(q, field):
    # common practice, no source: errors name the field and echo the value
    with pytest.raises(QuestionError) as err:
        get(q["outcome"], q["layout"]).solve_n(q, q["alpha"])
    assert err.value.field == field


def test_too_small_effect_is_a_clear_error():
    # common practice, no source: beyond 1e9 per group the question is refused, not looped on
    q = make_q("continuous", "two_groups", effect={"difference": 1e-6})
    with pytest.raises(QuestionError, match="too small an effect") as err:
        get("continuous", "two_groups").solve_n(q, 0.05)
    assert err.value.field == "effect.difference"


def test_describe_names_method_and_reference():
    # common practice, no source: the record names the method and a reference
    for q in (
        make_q("continuous", "two_groups"),
        make_q("continuous", "two_groups", analysis="welch_t"),
        _tost_q(),
        make_q("continuous", "single_group"),
        make_q("continuous", "paired"),
    ):
        block = get(q["outcome"], q["layout"]).describe(q)
        assert block["method"] == "analytic" and block["approximation"] and block["reference"]
        assert block["analysis"] == q["analysis"] and block["analysis_label"]


# --- one sample and paired -------------------------------------------------------------------


@pytest.mark.parametrize(
    ("layout", "assumptions", "difference", "raw", "ceil"),
    [
        (
            "single_group",
            {"sd": 1.0},
            0.5,
            33.37,
            34,
        ),  # formula: noncentral t; Guenther (1981) gives 33.32
        ("paired", {"sd_difference": 1.0}, 0.2, 198.15, 199),  # formula: noncentral t
        # formula: d_z = Δ / (σ·√(2(1−ρ))) with Δ/σ = 0.5, ρ = 0.7 → 0.6455
        ("paired", {"sd": 1.0, "correlation": 0.7}, 0.5, 20.84, 21),
    ],
)
def test_one_sample_and_paired_reference(layout, assumptions, difference, raw, ceil):
    q = make_q("continuous", layout, effect={"difference": difference}, assumptions=assumptions)
    got_raw, got = answer(q)
    assert got_raw[0] == pytest.approx(raw, abs=0.01)
    assert got == [ceil]


@pytest.mark.parametrize("d", [0.1, 0.25, 0.5, 0.9, 1.5])
@pytest.mark.parametrize(
    ("alpha", "alternative"), [(0.05, "two-sided"), (0.01, "two-sided"), (0.05, "one-sided")]
)
def test_single_group_matches_statsmodels(d, alpha, alternative):
    # statsmodels TTestPower (general-purpose library): one-sample noncentral t, df = n − 1
    alt = "two-sided" if alternative == "two-sided" else "larger"
    design = get("continuous", "single_group")
    q = make_q(
        "continuous",
        "single_group",
        effect={"difference": d * 2.0},
        assumptions={"sd": 2.0},
        alternative=alternative,
        alpha=alpha,
    )
    ref_n = TTestPower().solve_power(d, nobs=None, alpha=alpha, power=0.8, alternative=alt)
    assert design.solve_n(q, alpha).per_group[0] == pytest.approx(ref_n, rel=1e-4)
    assert design.power(q, [25], alpha) == pytest.approx(
        TTestPower().power(d, 25, alpha, alternative=alt), abs=1e-6
    )
    eff = design.solve_effect(q, [25], alpha)
    ref_d = TTestPower().solve_power(None, nobs=25, alpha=alpha, power=0.8, alternative=alt)
    assert eff["value"] / 2.0 == pytest.approx(ref_d, rel=1e-5)
