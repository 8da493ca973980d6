"""Labels that say what was computed: the non-inferiority score test, default levels, pooled t
with unequal SDs, zero effects, a one-sided k-group alternative, exact-ratio rounding.

Sources beside each check: Farrington & Manning (1990), Stat Med 9:1447 (score test, sample-size
formula; its restricted MLE checked against scipy's numerical maximization, its power against an
exact binomial enumeration computed here — no printed value of the paper is used); ICH E9 (1998)
for one-sided 0.025; the pooled t test's size with unequal SDs by a seeded simulation of its
summary statistics computed here; Cohen (1988) eq. 2.3.1 for the 3:1 two-group size.
"""

import math

import numpy as np
import pytest
from scipy import optimize, stats

from service.engine import QuestionError, compute
from service.engine.designs.binary_two_groups import restricted_mle
from service.schemas.question import QuestionInvalid, load_question
from tests.engine.questions import make_q


def _numeric_mle(p1, p2, r, margin):
    """Maximize the expected log-likelihood under p̃2 = p̃1 + margin (n2 = r·n1) numerically."""

    def nll(q1):
        q2 = q1 + margin
        return -(
            p1 * math.log(q1)
            + (1 - p1) * math.log(1 - q1)
            + r * (p2 * math.log(q2) + (1 - p2) * math.log(1 - q2))
        )

    lo, hi = max(0.0, -margin) + 1e-12, min(1.0, 1.0 - margin) - 1e-12
    res = optimize.minimize_scalar(nll, bounds=(lo, hi), method="bounded", options={"xatol": 1e-13})
    return res.x, res.x + margin


@pytest.mark.parametrize(
    "p1, p2, r, margin",
    [(0.7, 0.65, 0.5, -0.1), (0.7, 0.7, 1.0, -0.1), (0.3, 0.3, 2.0, 0.1), (0.85, 0.9, 1.0, -0.12)],
)
def test_restricted_mle_is_the_constrained_maximum(p1, p2, r, margin):
    got = restricted_mle(p1, p2, r, margin)
    assert got == pytest.approx(_numeric_mle(p1, p2, r, margin), abs=1e-7)
    assert got[1] - got[0] == pytest.approx(margin, abs=1e-12)


TWO_GROUPS_ZERO = {
    "outcome": "continuous",
    "layout": "two_groups",
    "effect": {"difference": 0},
    "assumptions": {"sd": 1},
}


def _ni(**extra):
    raw = {
        "outcome": "binary",
        "layout": "two_groups",
        "effect": {"p_treatment": 0.7},
        "assumptions": {"p_control": 0.7},
        "hypothesis": {"aim": "noninferiority", "margin": -0.1},
    }
    raw.update(extra)
    return load_question(raw)


def test_noninferiority_of_proportions_defaults_to_the_score_test():
    q = _ni()
    assert q["analysis"] == "score" and q["alpha"] == 0.025 and q["alternative"] == "one-sided"
    record = compute(q)
    assert record["method"]["analysis_label"] == "Farrington-Manning score test"
    assert "restricted-MLE" in record["method"]["approximation"]
    # Farrington & Manning (1990): n1 = [z_a·√V0 + z_b·√V1]² / (Δ − margin)², V0 at the
    # restricted MLE (here by numerical maximization), V1 at the assumed proportions.
    q1, q2 = _numeric_mle(0.7, 0.7, 1.0, -0.1)
    v0, v1 = q1 * (1 - q1) + q2 * (1 - q2), 2 * 0.7 * 0.3
    za, zb = stats.norm.isf(0.025), stats.norm.ppf(0.8)
    n = (za * math.sqrt(v0) + zb * math.sqrt(v1)) ** 2 / 0.1**2
    assert record["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(n, rel=1e-8)
    assert record["sample_size"]["per_group"] == [math.ceil(n)] * 2


def _exact_score_power(n1, n2, p1, p2, margin, alpha, *, upper=True, reject_map=False):
    """Exact rejection probability of the one-sided FM score test by enumerating both binomials.

    The restricted MLE of each outcome is found by bisection on the score equation (not the
    closed form under test). ``upper`` rejects for differences above the margin.
    """
    x1, x2 = np.meshgrid(np.arange(n1 + 1), np.arange(n2 + 1), indexing="ij")
    h1, h2 = x1 / n1, x2 / n2
    lo = np.full(h1.shape, max(0.0, -margin) + 1e-12)
    hi = np.full(h1.shape, min(1.0, 1.0 - margin) - 1e-12)
    for _ in range(60):  # d/dq1 of the log-likelihood is decreasing: bisect its root
        mid = (lo + hi) / 2
        q2 = mid + margin
        slope = n1 * (h1 / mid - (1 - h1) / (1 - mid)) + n2 * (h2 / q2 - (1 - h2) / (1 - q2))
        lo, hi = np.where(slope > 0, mid, lo), np.where(slope > 0, hi, mid)
    q1 = (lo + hi) / 2
    q2 = q1 + margin
    sd0 = np.sqrt(q1 * (1 - q1) / n1 + q2 * (1 - q2) / n2)
    stat = (h2 - h1 - margin) / sd0
    reject = stat > stats.norm.isf(alpha) if upper else stat < -stats.norm.isf(alpha)
    if reject_map:
        return reject
    weight = np.outer(
        stats.binom.pmf(np.arange(n1 + 1), n1, p1), stats.binom.pmf(np.arange(n2 + 1), n2, p2)
    )
    return float((weight * reject).sum())


def test_farrington_manning_power_holds_under_exact_enumeration():
    record = compute(_ni())
    n = record["sample_size"]["per_group"][0]
    exact = _exact_score_power(n, n, 0.7, 0.7, -0.1, 0.025)
    assert abs(exact - record["power"]["estimate"]) < 0.02  # normal approximation vs exact
    size = _exact_score_power(n, n, 0.75, 0.65, -0.1, 0.025)  # at the margin: the level
    assert abs(size - 0.025) < 0.006


@pytest.mark.parametrize("analysis", ["pooled_z", "arcsine"])
def test_an_analysis_that_does_not_apply_to_noninferiority_is_refused(analysis):
    with pytest.raises(QuestionInvalid) as err:
        _ni(analysis=analysis)
    message = " ".join(err.value.errors["analysis"])
    assert "score" in message and "unpooled_z" in message


def test_unpooled_wald_stays_an_option_and_is_labelled_so():
    q = _ni(analysis="unpooled_z")
    record = compute(q)
    assert record["question"]["analysis"] == "unpooled_z"
    assert "Wald" in record["method"]["analysis_label"]
    za, zb = stats.norm.isf(0.025), stats.norm.ppf(0.8)
    n = (za + zb) ** 2 * 2 * 0.21 / 0.1**2  # Chow, Shao & Wang (2008), ch. 4, formula
    assert record["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(n, rel=1e-10)


def test_the_score_test_against_superiority_is_refused():
    with pytest.raises(QuestionInvalid) as err:
        load_question(
            {
                "outcome": "binary",
                "layout": "two_groups",
                "effect": {"p_treatment": 0.5},
                "assumptions": {"p_control": 0.3},
                "analysis": "score",
            }
        )
    assert "pooled_z" in " ".join(err.value.errors["analysis"])


@pytest.mark.parametrize(
    "blocks, hyp",
    [
        (TWO_GROUPS_ZERO, {"aim": "noninferiority", "margin": -0.3}),
        (TWO_GROUPS_ZERO, {"aim": "equivalence", "margin": 0.3}),
        (
            {
                "outcome": "binary",
                "layout": "two_groups",
                "effect": {"p_treatment": 0.5},
                "assumptions": {"p_control": 0.5},
            },
            {"aim": "equivalence", "margin": 0.1},
        ),
    ],
)
def test_margin_hypotheses_default_to_one_sided_0025_and_say_so(blocks, hyp):
    # ICH E9 (1998): one-sided 0.025 for non-inferiority and equivalence trials.
    record = compute(load_question({**blocks, "hypothesis": hyp}))
    assert record["question"]["alpha"] == 0.025
    assert record["question"]["alternative"] == "one-sided"
    assert "ICH E9" in record["method"]["alpha_note"]
    from service.reports.justification import justification

    assert "ICH E9" in justification(record)


def test_superiority_keeps_alpha_005_and_a_posted_005_under_a_margin_is_flagged():
    q = load_question(
        {
            "outcome": "continuous",
            "layout": "two_groups",
            "effect": {"difference": 0.5},
            "assumptions": {"sd": 1},
        }
    )
    assert q["alpha"] == 0.05
    record = compute(
        load_question(
            {
                "outcome": "continuous",
                "layout": "two_groups",
                "alpha": 0.05,
                "effect": {"difference": 0},
                "assumptions": {"sd": 1},
                "hypothesis": {"aim": "noninferiority", "margin": -0.3},
            }
        )
    )
    assert "above it" in record["method"]["alpha_note"]


def test_pooled_t_with_unequal_sds_is_warned_and_points_to_welch():
    # The pooled t test's size at SD 1 (n 60) vs SD 2 (n 20): a seeded simulation of its
    # sufficient statistics (computed here, 200,000 trials, MCSE ≈ 0.0008) gives about 0.15.
    rng = np.random.default_rng(20261202)
    reps, n1, n2 = 200_000, 60, 20
    m = rng.normal(0, 1 / math.sqrt(n1), reps) - rng.normal(0, 2 / math.sqrt(n2), reps)
    ss = rng.chisquare(n1 - 1, reps) + 4 * rng.chisquare(n2 - 1, reps)
    t = m / np.sqrt(ss / (n1 + n2 - 2) * (1 / n1 + 1 / n2))
    size = float(np.mean(np.abs(t) > stats.t.isf(0.025, n1 + n2 - 2)))
    assert 0.14 < size < 0.165
    q = load_question(
        {
            "outcome": "continuous",
            "layout": "two_groups",
            "find": "power",
            "analysis": "pooled_t",
            "effect": {"difference": 0.5},
            "assumptions": {"sd_control": 1, "sd_treatment": 2},
            "sample_size": {"per_group": [60, 20]},
        }
    )
    record = compute(q)
    assert any("Welch" in w and "does not hold its level" in w for w in record["warnings"])
    assert "pooled variance" not in record["method"]["approximation"]
    equal = compute(
        dict(q, effect={"difference": 0.5}, assumptions={"sd_control": 1, "sd_treatment": 1})
    )
    assert not any("Welch" in w for w in equal["warnings"])


TIMELINE = {"time_unit": "months", "control_median": 12, "accrual": 12, "follow_up": 12}
ZERO = {
    ("continuous", "two_groups"): ({"difference": 0}, {"sd": 1}, [40, 40]),
    ("continuous", "single_group"): ({"difference": 0}, {"sd": 1}, [40]),
    ("continuous", "paired"): ({"difference": 0}, {"sd_difference": 1}, [40]),
    ("binary", "two_groups"): ({"p_treatment": 0.3}, {"p_control": 0.3}, [40, 40]),
    ("association", "single_group"): ({"r": 0}, {}, [40]),
    ("ordinal", "two_groups"): ({"prob_superiority": 0.5}, {}, [40, 40]),
    ("time_to_event", "two_groups"): ({"hazard_ratio": 1}, TIMELINE, [40, 40]),
}


def _zero(cell: tuple) -> dict:
    effect, assumptions, per_group = ZERO[cell]
    return {
        "outcome": cell[0],
        "layout": cell[1],
        "find": "power",
        "effect": effect,
        "assumptions": assumptions,
        "sample_size": {"per_group": per_group},
    }


@pytest.mark.parametrize("cell", sorted(ZERO))
def test_zero_effect_find_power_is_the_size_of_the_test_everywhere(cell):
    raw = _zero(cell)
    record = compute(load_question(raw))
    # Normal and t approximations at a zero shift reject with probability alpha exactly.
    assert record["power"]["estimate"] == pytest.approx(0.05, abs=1e-12)
    notes = [w for w in record["warnings"] if w.startswith("the assumed effect is the null value")]
    assert len(notes) == 1 and "size of the test" in notes[0]


@pytest.mark.parametrize("cell", [("continuous", "two_groups"), ("time_to_event", "two_groups")])
def test_zero_effect_simulated_power_is_the_simulated_size(cell):
    raw = {
        **_zero(cell),
        "method": "simulation",
        "simulation": {"seed": 77, "replicates": 2000},
    }
    record = compute(load_question(raw))
    est = record["power"]["estimate"]
    assert abs(est - 0.05) <= 4 * math.sqrt(0.05 * 0.95 / 2000)  # within 4 MCSE of alpha
    assert any(w.startswith("the assumed effect is the null value") for w in record["warnings"])


def test_a_one_sided_alternative_on_k_groups_is_refused():
    q = make_q("continuous", "k_groups", alternative="one-sided")
    with pytest.raises(QuestionError) as err:
        compute(q)
    assert err.value.field == "alternative" and "no direction" in err.value.message


def test_exact_ratio_rounding_keeps_three_to_one():
    base = {
        "outcome": "continuous",
        "layout": "two_groups",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1},
        "allocation_ratio": 3,
    }
    each = compute(load_question(base))
    exact = compute(load_question(dict(base, allocation_rounding="exact_ratio")))
    # Cohen (1988) eq. 2.3.1 with n2 = 3·n1 (noncentral t): raw 42.35 / 127.04.
    assert each["sample_size"]["per_group"] == [43, 128]
    assert exact["sample_size"]["per_group"] == [43, 129]
    assert each["sample_size"]["steps"][0]["rounding"] == "each_group"
    assert exact["sample_size"]["steps"][0]["rounding"] == "exact_ratio"
    with_dropout = compute(
        load_question(dict(base, allocation_rounding="exact_ratio", adjustments={"dropout": 0.15}))
    )
    n1, n2 = with_dropout["sample_size"]["per_group"]
    assert n2 == 3 * n1 and n1 >= 43 / 0.85


@pytest.mark.parametrize(
    "extra, why",
    [
        ({"allocation_ratio": math.e}, "denominator at most 100"),
        ({"find": "power", "sample_size": {"per_group": [20, 60]}}, "find = sample_size"),
        ({"method": "simulation"}, "analytic answers"),
        ({"adjustments": {"cluster": {"mean_size": 20, "icc": 0.05}}}, "whole clusters"),
    ],
)
def test_exact_ratio_rounding_refuses_where_it_cannot_apply(extra, why):
    raw = {
        "outcome": "continuous",
        "layout": "two_groups",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1},
        "allocation_ratio": 3,
        "allocation_rounding": "exact_ratio",
        **extra,
    }
    with pytest.raises(QuestionInvalid) as err:
        load_question(raw)
    assert why in " ".join(err.value.errors["allocation_rounding"])


def test_farrington_manning_equivalence_power_holds_under_exact_enumeration():
    # Two one-sided score tests at ±0.15, both must reject; exact enumeration computed here.
    raw = {
        "outcome": "binary",
        "layout": "two_groups",
        "find": "power",
        "effect": {"p_treatment": 0.62},
        "assumptions": {"p_control": 0.6},
        "hypothesis": {"aim": "equivalence", "margin": 0.15},
        "sample_size": {"per_group": [200, 200]},
    }
    record = compute(load_question(raw))
    assert record["question"]["analysis"] == "score"
    low = _exact_score_power(200, 200, 0.6, 0.62, -0.15, 0.025, reject_map=True)
    high = _exact_score_power(200, 200, 0.6, 0.62, 0.15, 0.025, upper=False, reject_map=True)
    weight = np.outer(
        stats.binom.pmf(np.arange(201), 200, 0.6), stats.binom.pmf(np.arange(201), 200, 0.62)
    )
    exact = float((weight * (low & high)).sum())
    assert abs(exact - record["power"]["estimate"]) < 0.02
