"""One-way ANOVA, correlation (Fisher z) and rank-sum (Noether) checked against Cohen, statsmodels and the formulas."""

from __future__ import annotations

import math

import pytest
from scipy import stats
from statsmodels.stats.power import FTestAnovaPower, NormalIndPower

from service.engine.designs import get
from service.engine.errors import QuestionError
from tests.engine.questions import answer, make_q

# --- one-way ANOVA ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("k", "f", "raw", "ceil"),
    [
        (3, 0.10, 322.16, 323),  # Cohen 1988, Table 8.4.4 prints 322 (nearest); recomputed
        (3, 0.25, 52.40, 53),  # Cohen 1988, Table 8.4.4 prints 52 (nearest); recomputed
        (3, 0.40, 21.10, 22),  # Cohen 1988, Table 8.4.4 prints 21 (nearest); recomputed
        (4, 0.10, 273.54, 274),  # Cohen 1988, Table 8.4.4 prints 274; recomputed
        (4, 0.40, 18.04, 19),  # Cohen 1988, Table 8.4.4 prints 18 (nearest); recomputed
    ],
)
def test_anova_cohen_table(k, f, raw, ceil):
    q = make_q("continuous", "k_groups", effect={"cohens_f": f}, assumptions={"group_count": k})
    got_raw, got = answer(q)
    assert got_raw[0] == pytest.approx(raw, abs=0.01)
    assert got == [ceil] * k
    assert get("continuous", "k_groups").allocation(q) == [1.0] * k


@pytest.mark.parametrize("k", [2, 3, 5])
@pytest.mark.parametrize("f", [0.1, 0.25, 0.4, 0.7])
@pytest.mark.parametrize("alpha", [0.05, 0.01])
def test_anova_matches_statsmodels(k, f, alpha):
    # statsmodels FTestAnovaPower (general-purpose library); it works with the total N
    design = get("continuous", "k_groups")
    q = make_q(
        "continuous",
        "k_groups",
        effect={"cohens_f": f},
        assumptions={"group_count": k},
        alpha=alpha,
    )
    total = FTestAnovaPower().solve_power(f, nobs=None, alpha=alpha, power=0.8, k_groups=k)
    assert design.solve_n(q, alpha).per_group[0] * k == pytest.approx(total, rel=1e-4)
    assert design.power(q, [30] * k, alpha) == pytest.approx(
        FTestAnovaPower().power(f, 30 * k, alpha, k_groups=k), abs=1e-6
    )
    eff = design.solve_effect(q, [30] * k, alpha)
    ref = FTestAnovaPower().solve_power(None, nobs=30 * k, alpha=alpha, power=0.8, k_groups=k)
    assert eff["field"] == "cohens_f" and eff["value"] == pytest.approx(ref, rel=1e-4)


def test_anova_bad_groups_names_the_field():
    # common practice, no source: errors name the field and echo the value
    with pytest.raises(QuestionError) as err:
        get("continuous", "k_groups").solve_n(
            make_q("continuous", "k_groups", assumptions={"group_count": 1}), 0.05
        )
    assert err.value.field == "assumptions.group_count"


# --- correlation -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("r", "raw", "ceil"),
    [
        (0.1, 782.65, 783),  # Cohen 1988, Table 3.4.1 prints 783; recomputed
        (0.3, 84.93, 85),  # Cohen 1988, Table 3.4.1 prints 85; recomputed
        # Cohen 1988, Table 3.4.1 prints 28, which Fisher z does not reproduce:
        # the method's own answer is tested, and the describe block notes the difference
        (0.5, 29.01, 30),
    ],
)
def test_correlation_fisher_z(r, raw, ceil):
    q = make_q("association", "single_group", effect={"r": r})
    got_raw, got = answer(q)
    assert got_raw[0] == pytest.approx(raw, abs=0.01)
    assert got == [ceil]


def test_correlation_note_on_cohen_r_half():
    # Cohen (1988) Table 3.4.1 prints 28 for r = 0.5; the record says so
    notes = " ".join(
        get("association", "single_group").describe(make_q("association", "single_group"))["notes"]
    )
    assert "28" in notes and "0.5" in notes


@pytest.mark.parametrize(("r", "r_null"), [(0.3, 0.0), (0.5, 0.2), (-0.4, 0.0), (0.1, 0.3)])
@pytest.mark.parametrize("alternative", ["one-sided", "two-sided"])
def test_correlation_power_and_effect_round_trip(r, r_null, alternative):
    # formula: Fisher z, atanh(r̂) ~ N(atanh r, 1/(n − 3)); statsmodels NormalIndPower with
    # ratio 0 is the one-sample normal test with effect √1·Δz
    design = get("association", "single_group")
    q = make_q(
        "association",
        "single_group",
        effect={"r": r},
        assumptions={"r_null": r_null},
        alternative=alternative,
    )
    alt = "two-sided" if alternative == "two-sided" else "larger"
    shift = abs(math.atanh(r) - math.atanh(r_null))
    assert design.power(q, [60], 0.05) == pytest.approx(
        NormalIndPower().power(shift, 57, 0.05, ratio=0, alternative=alt), abs=1e-9
    )
    n = design.solve_n(q, 0.05).per_group[0]
    assert design.power(q, [n], 0.05) == pytest.approx(0.8, abs=1e-5)  # far tail only
    eff = design.solve_effect(
        make_q(
            "association", "single_group", assumptions={"r_null": r_null}, alternative=alternative
        ),
        [60],
        0.05,
    )
    q2 = make_q(
        "association",
        "single_group",
        effect={"r": eff["value"]},
        assumptions={"r_null": r_null},
        alternative=alternative,
    )
    assert eff["value"] > r_null
    assert design.power(q2, [60], 0.05) == pytest.approx(0.8, abs=1e-9)


def test_correlation_bad_r_names_the_field():
    # common practice, no source: errors name the field and echo the value
    with pytest.raises(QuestionError, match="1.2") as err:
        get("association", "single_group").solve_n(
            make_q("association", "single_group", effect={"r": 1.2}), 0.05
        )
    assert err.value.field == "effect.r"


# --- rank sum (Noether) ----------------------------------------------------------------------


def test_noether_normal_shift():
    # formula: Noether (1987), JASA 82:645; d = 0.5 → P(X<Y) = 0.6382, N = 137.06 → 138 total
    q = make_q("ordinal", "two_groups")
    assert q["effect"]["prob_superiority"] == pytest.approx(0.6382, abs=1e-4)
    raw, final = answer(q)
    assert sum(raw) == pytest.approx(137.06, abs=0.01)
    assert final == [69, 69] and sum(final) == 138


def test_noether_efficiency_tends_to_three_over_pi():
    # Hodges & Lehmann (1956), Ann Math Stat 27:324: ARE of the rank-sum test against t on
    # normal data is 3/π; Noether's N over the normal-theory N tends to π/3 for small shifts
    d = 0.01
    q = make_q(
        "ordinal",
        "two_groups",
        effect={"prob_superiority": float(stats.norm.cdf(d / math.sqrt(2)))},
    )
    noether_total = sum(get("ordinal", "two_groups").solve_n(q, 0.05).per_group)
    normal_total = 2 * 2 * (stats.norm.ppf(0.975) + stats.norm.ppf(0.8)) ** 2 / d**2
    assert normal_total / noether_total == pytest.approx(3 / math.pi, abs=1e-4)


@pytest.mark.parametrize("ratio", [1.0, 2.0, 0.5])
def test_noether_allocation_and_round_trip(ratio):
    # formula: Noether (1987) with c = n1/N; power at the raw n is the target up to the far tail
    design = get("ordinal", "two_groups")
    q = make_q("ordinal", "two_groups", allocation_ratio=ratio)
    raw = design.solve_n(q, 0.05).per_group
    c = 1 / (1 + ratio)
    z_sum = stats.norm.ppf(0.975) + stats.norm.ppf(0.8)
    total = z_sum**2 / (12 * c * (1 - c) * (q["effect"]["prob_superiority"] - 0.5) ** 2)
    assert raw == pytest.approx([c * total, (1 - c) * total], rel=1e-12)
    assert design.power(q, raw, 0.05) == pytest.approx(0.8, abs=1e-5)
    eff = design.solve_effect(make_q("ordinal", "two_groups"), [50, 50 * ratio], 0.05)
    q2 = make_q("ordinal", "two_groups", effect={"prob_superiority": eff["value"]})
    assert design.power(q2, [50, 50 * ratio], 0.05) == pytest.approx(0.8, abs=1e-9)


def test_noether_bad_probability_names_the_field():
    # common practice, no source: P(Y > X) = ½ is no effect
    with pytest.raises(QuestionError) as err:
        get("ordinal", "two_groups").solve_n(
            make_q("ordinal", "two_groups", effect={"prob_superiority": 0.5}), 0.05
        )
    assert err.value.field == "effect.prob_superiority"
