"""Analytic two-proportion designs checked against Fleiss, Cohen, Chow–Shao–Wang and statsmodels."""

from __future__ import annotations

import math
from functools import partial

import pytest
from scipy import stats
from statsmodels.stats.power import NormalIndPower

from service.engine.designs import get
from service.engine.errors import QuestionError
from tests.engine.questions import answer
from tests.engine.questions import make_q as _make_q

DESIGN = get("binary", "two_groups")
make_q = partial(_make_q, "binary", "two_groups")


def p_for_h(p1: float, h: float) -> float:
    """Return p2 with 2·asin√p2 − 2·asin√p1 = h."""
    return math.sin(math.asin(math.sqrt(p1)) + h / 2) ** 2


@pytest.mark.parametrize(
    ("p1", "p2", "cc", "raw", "ceil"),
    [
        (0.05, 0.10, False, 434.43, 435),  # Fleiss, Levin & Paik 2003, ch. 4 print 435; recomputed
        (
            0.05,
            0.10,
            True,
            473.59,
            474,
        ),  # Fleiss, Levin & Paik 2003, ch. 4 print 474 (corrected); recomputed
        (
            0.40,
            0.60,
            False,
            96.92,
            97,
        ),  # formula: Fleiss, Levin & Paik 2003, pooled variance under H0
        (0.40, 0.60, True, 106.69, 107),  # formula: same, with the continuity correction
    ],
)
def test_pooled_z_fleiss(p1, p2, cc, raw, ceil):
    q = make_q(
        effect={"p_treatment": p2},
        assumptions={"p_control": p1},
        analysis_options={"continuity_correction": cc},
    )
    got_raw, got = answer(q)
    assert got_raw[0] == pytest.approx(raw, abs=0.01)
    assert got == [ceil, ceil]


@pytest.mark.parametrize(
    ("h", "raw", "ceil"),
    [
        (0.2, 392.44, 393),  # Cohen 1988, Table 6.4.1 prints 392 (nearest); recomputed
        (0.5, 62.79, 63),  # Cohen 1988, Table 6.4.1 prints 63; recomputed
        (0.8, 24.53, 25),  # Cohen 1988, Table 6.4.1 prints 25; recomputed
    ],
)
@pytest.mark.parametrize("p1", [0.2, 0.5])
def test_arcsine_cohen_table(h, raw, ceil, p1):
    q = make_q(
        effect={"p_treatment": p_for_h(p1, h)}, assumptions={"p_control": p1}, analysis="arcsine"
    )
    got_raw, got = answer(q)
    assert got_raw[0] == pytest.approx(raw, abs=0.01)
    assert got == [ceil, ceil]


def test_unpooled_equality_chow_shao_wang():
    # Chow, Shao & Wang 2008, ch. 4 print 70 for .85 vs .65; full-precision quantiles give 69.66; recomputed
    q = make_q(effect={"p_treatment": 0.85}, assumptions={"p_control": 0.65}, analysis="unpooled_z")
    raw, final = answer(q)
    assert raw[0] == pytest.approx(69.66, abs=0.01)
    assert final == [70, 70]


@pytest.mark.parametrize("h", [0.1, 0.3, 0.6])
@pytest.mark.parametrize("ratio", [1.0, 0.5, 2.5])
@pytest.mark.parametrize(
    ("alpha", "alternative"), [(0.05, "two-sided"), (0.05, "one-sided"), (0.01, "two-sided")]
)
def test_arcsine_matches_statsmodels(h, ratio, alpha, alternative):
    # statsmodels NormalIndPower with effect size Cohen's h (general-purpose library)
    alt = "two-sided" if alternative == "two-sided" else "larger"
    q = make_q(
        effect={"p_treatment": p_for_h(0.3, h)},
        assumptions={"p_control": 0.3},
        analysis="arcsine",
        allocation_ratio=ratio,
        alternative=alternative,
        alpha=alpha,
    )
    ref_n = NormalIndPower().solve_power(
        h, nobs1=None, alpha=alpha, power=0.8, ratio=ratio, alternative=alt
    )
    # The closed form leaves out the far tail (below 1e-6 here), statsmodels solves with it.
    assert DESIGN.solve_n(q, alpha).per_group[0] == pytest.approx(ref_n, rel=1e-4)
    ref_p = NormalIndPower().power(h, 80, alpha, ratio=ratio, alternative=alt)
    assert DESIGN.power(q, [80, 80 * ratio], alpha) == pytest.approx(ref_p, abs=1e-9)


@pytest.mark.parametrize("ratio", [1.0, 2.0, 0.5])
@pytest.mark.parametrize("cc", [False, True])
@pytest.mark.parametrize(("p1", "p2"), [(0.05, 0.10), (0.40, 0.60), (0.70, 0.50)])
def test_pooled_z_power_inverts_solve(ratio, cc, p1, p2):
    # formula: Fleiss, Levin & Paik 2003; the (generalised) correction is the inverse of the
    # corrected test's power, so power at the raw n is the target up to the far tail
    q = make_q(
        effect={"p_treatment": p2},
        assumptions={"p_control": p1},
        analysis_options={"continuity_correction": cc},
        allocation_ratio=ratio,
    )
    raw = DESIGN.solve_n(q, 0.05).per_group
    assert raw[1] == pytest.approx(ratio * raw[0])
    assert DESIGN.power(q, raw, 0.05) == pytest.approx(0.8, abs=1e-5)


def test_continuity_correction_equal_arms_formula():
    # formula: Fleiss, Levin & Paik 2003, n = n′/4·(1 + √(1 + 4/(n′·|Δ|)))² for equal arms
    plain = DESIGN.solve_n(make_q(), 0.05).per_group[0]
    corrected = DESIGN.solve_n(
        make_q(analysis_options={"continuity_correction": True}), 0.05
    ).per_group[0]
    assert corrected == pytest.approx(
        plain / 4 * (1 + math.sqrt(1 + 4 / (plain * 0.05))) ** 2, rel=1e-12
    )


def test_noninferiority_unpooled_matches_statsmodels():
    # Chow, Shao & Wang 2008, ch. 4 (unpooled z); statsmodels NormalIndPower with the
    # standardized distance to the margin, (Δ − m)·√2 / √(p1q1 + p2q2), one-sided
    q = make_q(
        effect={"p_treatment": 0.80},
        assumptions={"p_control": 0.80},
        hypothesis={"aim": "noninferiority", "margin": -0.10},
    )
    raw, final = answer(q)
    es = 0.10 * math.sqrt(2) / math.sqrt(2 * 0.8 * 0.2)
    ref = NormalIndPower().solve_power(es, nobs1=None, alpha=0.05, power=0.8, alternative="larger")
    assert raw[0] == pytest.approx(ref, rel=1e-6)
    assert final == [math.ceil(ref), math.ceil(ref)]
    eff = DESIGN.solve_effect(q, raw, 0.05)
    assert eff == {"field": "p_treatment", "value": pytest.approx(0.80, abs=1e-6)}


def test_equivalence_proportions_closed_form_at_zero_difference():
    # Chow, Shao & Wang 2008, ch. 4: n = (z_{1−α} + z_{1−β/2})²·2pq / m² when p1 = p2
    q = make_q(
        effect={"p_treatment": 0.80},
        assumptions={"p_control": 0.80},
        hypothesis={"aim": "equivalence", "margin": 0.10},
    )
    z_sum = stats.norm.ppf(0.95) + stats.norm.ppf(0.90)
    expected = z_sum**2 * 2 * 0.8 * 0.2 / 0.10**2
    assert DESIGN.solve_n(q, 0.05).per_group[0] == pytest.approx(expected, rel=1e-8)
    eff = DESIGN.solve_effect(q, [400, 400], 0.05)
    assert 0.80 < eff["value"] < 0.90
    q2 = make_q(
        effect={"p_treatment": eff["value"]},
        assumptions={"p_control": 0.80},
        hypothesis={"aim": "equivalence", "margin": 0.10},
    )
    assert DESIGN.power(q2, [400, 400], 0.05) == pytest.approx(0.8, abs=1e-6)


@pytest.mark.parametrize("higher", [True, False])
@pytest.mark.parametrize("analysis", ["pooled_z", "arcsine"])
def test_solve_effect_round_trip(higher, analysis):
    # formula: the solved p_treatment puts the power back on the target, on the better side
    q = make_q(
        assumptions={"p_control": 0.30}, analysis=analysis, hypothesis={"higher_is_better": higher}
    )
    eff = DESIGN.solve_effect(q, [120, 120], 0.05)
    assert (eff["value"] > 0.30) is higher
    q2 = make_q(
        effect={"p_treatment": eff["value"]}, assumptions={"p_control": 0.30}, analysis=analysis
    )
    assert DESIGN.power(q2, [120, 120], 0.05) == pytest.approx(0.8, abs=1e-6)


def test_warnings_for_small_expected_counts():
    # common practice, no source: the normal approximation wants n·p of 5 or more per group
    q = make_q(effect={"p_treatment": 0.20}, assumptions={"p_control": 0.02})
    assert any("control group" in w for w in DESIGN.warnings_for(q, [60, 60]))
    assert DESIGN.warnings_for(q, [600, 600]) == []


@pytest.mark.parametrize(
    ("q", "field"),
    [
        (make_q(effect={"p_treatment": 0.05}), "effect.p_treatment"),
        (make_q(assumptions={"p_control": 1.0}), "assumptions.p_control"),
        (
            make_q(analysis_options={"continuity_correction": True}, analysis="arcsine"),
            "analysis_options.continuity_correction",
        ),
        (
            make_q(analysis="arcsine", hypothesis={"aim": "noninferiority", "margin": -0.1}),
            "analysis",
        ),
        (
            make_q(
                effect={"p_treatment": 0.65},
                assumptions={"p_control": 0.8},
                hypothesis={"aim": "noninferiority", "margin": -0.10},
            ),
            "effect.p_treatment",
        ),
    ],
)
def test_bad_input_names_the_field(q, field):
    # common practice, no source: errors name the field and echo the value
    with pytest.raises(QuestionError) as err:
        DESIGN.solve_n(q, q["alpha"])
    assert err.value.field == field


def test_unreachable_effect_is_a_clear_error():
    # common practice, no source: 4 per group cannot reach 99% power for any p_treatment
    q = make_q(assumptions={"p_control": 0.5}, target_power=0.99)
    with pytest.raises(QuestionError) as err:
        DESIGN.solve_effect(q, [4, 4], 0.05)
    assert err.value.field == "sample_size.per_group"


def test_describe_names_method_and_reference():
    # common practice, no source: each formula names its reference
    assert "Fleiss" in DESIGN.describe(make_q())["reference"]
    assert "Cohen" in DESIGN.describe(make_q(analysis="arcsine"))["reference"]
    ni = make_q(hypothesis={"aim": "noninferiority", "margin": -0.1})
    assert "Chow" in DESIGN.describe(ni)["reference"]
