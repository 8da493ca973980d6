"""Precision questions (hypothesis.aim = estimation): reference values for the interval math in
``service/engine/precision.py`` and the three cells that answer it.

Every expected value is recomputed here with a general-purpose library (scipy.stats,
statsmodels) or from a cited formula; the source and label are beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from service.engine import compute, precision
from service.schemas import load_question


def _answer(raw: dict) -> dict:
    return compute(load_question(raw))


def _mean_question(half_width: float, sd: float, **hyp) -> dict:
    return {
        "outcome": "continuous",
        "layout": "single_group",
        "hypothesis": {"aim": "estimation", "half_width": half_width, **hyp},
        "assumptions": {"sd": sd},
    }


def _expected_t_half_width(n: int, sd: float, confidence: float, df: float, scale: float):
    """t quantile × E[s] × scale, with E[s]/σ = mean of the chi distribution on df / √df
    (scipy.stats.chi, independent of the engine's c4)."""
    t = stats.t.ppf(0.5 + confidence / 2, df)
    return t * sd * scale * stats.chi.mean(df) / math.sqrt(df)


# --- a mean: the t interval ---------------------------------------------------------------------


@pytest.mark.parametrize(
    ("half_width", "sd", "confidence"),
    [(3.0, 20.0, 0.95), (0.5, 1.0, 0.90), (5.0, 15.0, 0.99), (1.0, 2.0, 0.95)],
)
def test_mean_n_is_the_smallest_with_expected_half_width_at_most_target(half_width, sd, confidence):
    # formula: Kupper & Hafner (1989), Am Stat 43:101: E[half-width] = t(n−1)·E[s]/√n; the
    # t quantile from scipy.stats.t, E[s] from scipy.stats.chi (not the engine's code).
    record = _answer(_mean_question(half_width, sd, confidence=confidence))
    n = record["sample_size"]["per_group"][0]
    at_n = _expected_t_half_width(n, sd, confidence, n - 1, 1 / math.sqrt(n))
    below = _expected_t_half_width(n - 1, sd, confidence, n - 2, 1 / math.sqrt(n - 1))
    assert at_n <= half_width < below
    assert record["precision"]["half_width_expected"] == pytest.approx(at_n, rel=1e-9)
    assert record["power"] is None


@pytest.mark.parametrize(
    ("half_width", "sd", "confidence"), [(3.0, 20.0, 0.95), (0.5, 1.0, 0.90), (5.0, 15.0, 0.99)]
)
def test_mean_n_is_at_least_the_z_formula(half_width, sd, confidence):
    # formula: the classical large-sample n = (z·σ/E)² (e.g. Kupper & Hafner 1989, eq. 1) is a
    # lower bound: t > z, and t·c4 > z at every n.
    z = stats.norm.ppf(0.5 + confidence / 2)
    n_z = math.ceil((z * sd / half_width) ** 2)
    n = _answer(_mean_question(half_width, sd, confidence=confidence))["sample_size"]["total"]
    assert n_z <= n <= n_z + 5


@pytest.mark.parametrize(("assurance", "sd", "half_width"), [(0.9, 20.0, 3.0), (0.8, 1.0, 0.25)])
def test_mean_assurance_by_the_chi_square_distribution(assurance, sd, half_width):
    # formula: Kupper & Hafner (1989): P(t·s/√n ≤ E) = P(χ²(n−1) ≤ (n−1)·n·E²/(t·σ)²), from
    # scipy.stats.chi2; the n is the smallest reaching the assurance.
    record = _answer(_mean_question(half_width, sd, assurance=assurance))
    n = record["sample_size"]["per_group"][0]

    def prob(m: int) -> float:
        t = stats.t.ppf(0.975, m - 1)
        return stats.chi2.cdf((m - 1) * m * half_width**2 / (t * sd) ** 2, m - 1)

    assert prob(n) >= assurance > prob(n - 1)
    assert record["precision"]["probability"] == pytest.approx(prob(n), rel=1e-9)
    assert record["precision"]["half_width_assured"] <= half_width
    # more than the expected-width answer (assurance > the ~50% that one gives)
    plain = _answer(_mean_question(half_width, sd))["sample_size"]["per_group"][0]
    assert n > plain


def test_mean_assurance_agrees_with_simulated_samples():
    # Independent check of the chi-square argument: draw normal samples of the answered n
    # (numpy, fixed seed) and count how often t·s/√n ≤ E; within 4 Monte Carlo SEs of the
    # probability the record states.
    record = _answer(_mean_question(3.0, 20.0, assurance=0.9))
    n = record["sample_size"]["per_group"][0]
    rng = np.random.default_rng(20261202)
    reps = 4000
    s = rng.normal(50.0, 20.0, size=(reps, n)).std(axis=1, ddof=1)
    half = stats.t.ppf(0.975, n - 1) * s / math.sqrt(n)
    p = record["precision"]["probability"]
    seen = float(np.mean(half <= 3.0))
    assert abs(seen - p) <= 4 * math.sqrt(p * (1 - p) / reps)


def test_mean_interval_coverage_and_expected_half_width_simulated():
    # The interval's expected half-width at n: the mean of simulated t·s/√n (numpy samples),
    # within 4 Monte Carlo SEs of the record's value.
    record = _answer(_mean_question(0.5, 1.0))
    n = record["sample_size"]["per_group"][0]
    rng = np.random.default_rng(7)
    reps = 4000
    s = rng.normal(0.0, 1.0, size=(reps, n)).std(axis=1, ddof=1)
    half = stats.t.ppf(0.975, n - 1) * s / math.sqrt(n)
    se = half.std(ddof=1) / math.sqrt(reps)
    assert abs(half.mean() - record["precision"]["half_width_expected"]) <= 4 * se


def test_dropout_applies_and_precision_is_at_the_analyzed_size():
    raw = _mean_question(3.0, 20.0)
    raw["adjustments"] = {"dropout": 0.1}
    record = _answer(raw)
    base, dropout = record["sample_size"]["steps"]
    assert dropout["step"] == "dropout"
    assert dropout["per_group"][0] == math.ceil(base["per_group"][0] / 0.9 - 1e-9)
    n = base["per_group"][0]
    # formula (as above): the half-width is stated at the analyzed size, before dropout
    assert record["precision"]["half_width_expected"] == pytest.approx(
        _expected_t_half_width(n, 20.0, 0.95, n - 1, 1 / math.sqrt(n)), rel=1e-9
    )


def test_find_precision_gives_the_half_width_of_a_stated_size():
    raw = _mean_question(3.0, 20.0, assurance=0.9)
    raw["hypothesis"].pop("half_width")
    raw.update(find="precision", sample_size={"per_group": [200]})
    record = _answer(raw)
    t = stats.t.ppf(0.975, 199)
    # formula: the assured half-width is t·σ·√(χ²_0.9(199)/199)/√200 (Kupper & Hafner 1989)
    assured = t * 20.0 * math.sqrt(stats.chi2.ppf(0.9, 199) / 199) / math.sqrt(200)
    assert record["precision"]["half_width_assured"] == pytest.approx(assured, rel=1e-9)
    assert record["precision"]["half_width_target"] is None
    assert record["sample_size"]["per_group"] == [200]


# --- a difference in means: the pooled t interval ---------------------------------------------


@pytest.mark.parametrize(("ratio", "assurance"), [(1.0, None), (2.0, None), (1.0, 0.8)])
def test_difference_in_means_pooled(ratio, assurance):
    # formula: half-width t(n₁+n₂−2)·s_p·√(1/n₁ + 1/n₂), E[s_p] from scipy.stats.chi; with an
    # assurance P(χ²(df) ≤ df·(E/(t·σ·√(1/n₁+1/n₂)))²) (Kupper & Hafner 1989).
    hyp = {"aim": "estimation", "half_width": 2.0}
    if assurance is not None:
        hyp["assurance"] = assurance
    raw = {
        "outcome": "continuous",
        "layout": "two_groups",
        "hypothesis": hyp,
        "assumptions": {"sd": 10.0},
        "allocation_ratio": ratio,
    }
    record = _answer(raw)
    n1 = record["sample_size"]["per_group"][0]
    assert record["method"]["analysis"] == "pooled_t_interval"

    def measure(m1: int) -> float:
        m2 = math.ceil(ratio * m1 - 1e-9)
        df, scale = m1 + m2 - 2, math.sqrt(1 / m1 + 1 / m2)
        if assurance is None:
            return _expected_t_half_width(m1, 10.0, 0.95, df, scale)
        t = stats.t.ppf(0.975, df)
        return -stats.chi2.cdf(df * (2.0 / (t * 10.0 * scale)) ** 2, df)

    goal = 2.0 if assurance is None else -assurance
    assert measure(n1) <= goal < measure(n1 - 1)
    assert record["sample_size"]["per_group"][1] == math.ceil(ratio * n1 - 1e-9)


# --- a proportion: Wilson and Clopper-Pearson (the binary × single_group cell's math) ---------


@pytest.mark.parametrize("method", ["wilson", "clopper_pearson"])
@pytest.mark.parametrize(("p", "half_width"), [(0.5, 0.05), (0.1, 0.03), (0.3, 0.1), (0.02, 0.01)])
def test_proportion_interval_n(method, p, half_width):
    # general-purpose library: statsmodels proportion_confint ('wilson'; 'beta' is
    # Clopper-Pearson) at the count n·p: the n's interval has a half-width ≤ target and
    # n − 1's does not.
    solution = precision.proportion_interval_solution(p, half_width, 0.95, method)
    n = math.ceil(solution.per_group[0] - 1e-9)
    library = {"wilson": "wilson", "clopper_pearson": "beta"}[method]

    def width(m: int) -> float:
        lo, hi = proportion_confint(m * p, m, alpha=0.05, method=library)
        return (hi - lo) / 2

    assert width(n) <= half_width < width(n - 1)
    assert precision.proportion_half_width(p, n, 0.95, method) == pytest.approx(width(n), rel=1e-7)


@pytest.mark.parametrize(
    ("method", "limits"),
    # from memory: Newcombe (1998), Stat Med 17:857, the example 81/263 (its Table II), as
    # recalled, not checked against the printed page; statsmodels gives the same to 4 decimals.
    [("wilson", (0.2553, 0.3662)), ("clopper_pearson", (0.2527, 0.3676))],
)
def test_proportion_interval_textbook_example(method, limits):
    half = precision.proportion_half_width(81 / 263, 263, 0.95, method)
    assert half == pytest.approx((limits[1] - limits[0]) / 2, abs=1e-4)
    lo, hi = precision.wilson_limits(81 / 263, 263, 0.95)
    if method == "wilson":
        assert (round(float(lo), 4), round(float(hi), 4)) == limits


def test_proportion_n_is_near_the_wald_formula_at_one_half():
    # formula: the Wald n = z²·p(1 − p)/E² (384.1 at p = 0.5, E = 0.05) is close to Wilson's at
    # p = 0.5 (the score interval is a little narrower there: z²/4 over n + z²)
    n = precision.proportion_interval_solution(0.5, 0.05, 0.95, "wilson").per_group[0]
    wald = stats.norm.ppf(0.975) ** 2 * 0.25 / 0.05**2
    assert wald - 5 < n < wald


# --- a difference in proportions: Newcombe's hybrid score interval ----------------------------


def test_newcombe_textbook_example():
    # from memory: Newcombe (1998), Stat Med 17:873, the example 56/70 − 48/80 (method 10:
    # 0.0524 to 0.3339), as recalled; statsmodels' 'newcomb' method agrees to 4 decimals.
    lo, hi = confint_proportions_2indep(56, 70, 48, 80, method="newcomb", compare="diff")
    assert (round(lo, 4), round(hi, 4)) == (0.0524, 0.3339)
    half = precision.newcombe_half_width(48 / 80, 56 / 70, [80, 70], 0.95)
    assert half == pytest.approx((0.3339 - 0.0524) / 2, abs=1e-4)


@pytest.mark.parametrize(
    ("p_control", "p_treatment", "ratio", "half_width"),
    [(0.3, 0.45, 1.0, 0.1), (0.1, 0.05, 2.0, 0.05), (0.5, 0.5, 1.0, 0.08)],
)
def test_difference_in_proportions_n(p_control, p_treatment, ratio, half_width):
    # general-purpose library: statsmodels confint_proportions_2indep(method='newcomb') at the
    # counts n·p: the answer's interval has a half-width ≤ target; one fewer in the control
    # group (the treatment group following the ratio) does not.
    raw = {
        "outcome": "binary",
        "layout": "two_groups",
        "hypothesis": {"aim": "estimation", "half_width": half_width},
        "assumptions": {"p_control": p_control},
        "effect": {"p_treatment": p_treatment},
        "allocation_ratio": ratio,
    }
    record = _answer(raw)
    n1, n2 = record["sample_size"]["per_group"]
    assert record["method"]["analysis"] == "newcombe_interval"

    def width(m1: int, m2: int) -> float:
        lo, hi = confint_proportions_2indep(
            m2 * p_treatment, m2, m1 * p_control, m1, method="newcomb", compare="diff"
        )
        return (hi - lo) / 2

    assert width(n1, n2) <= half_width
    m1 = n1 - 1
    assert width(m1, math.ceil(ratio * m1 - 1e-9)) > half_width
    assert record["precision"]["half_width_expected"] == pytest.approx(width(n1, n2), rel=1e-7)


def test_unreachable_half_width_is_refused_on_the_field():
    from service.engine import QuestionError

    with pytest.raises(QuestionError) as caught:
        _answer(_mean_question(1e-6, 1000.0))
    assert caught.value.field == "hypothesis.half_width"


def test_sensitivity_grid_moves_the_half_width_and_robustness_is_refused():
    from service.engine import explore

    q = load_question(_mean_question(3.0, 20.0))
    grid = explore.sensitivity(q, {"hypothesis.half_width": [2.0, 3.0], "assumptions.sd": [20.0]})
    # formula (as above): each cell is the question answered again at its values
    for cell in grid["cells"]:
        again = _answer(_mean_question(cell["values"]["hypothesis.half_width"], 20.0))
        assert cell["per_group"] == again["sample_size"]["per_group"]
        assert cell["power"] is None
    assert "precision question" in explore.robustness_refusal(q)


def test_proportion_interval_part_for_the_single_group_cell():
    # general-purpose library: statsmodels proportion_confint (Wilson) at the count n·p
    q = {"hypothesis": {"aim": "estimation", "half_width": 0.05, "confidence": 0.9}}
    part = precision.proportion_interval(q, 0.2, [150], "wilson")
    lo, hi = proportion_confint(30, 150, alpha=0.1, method="wilson")
    assert part["half_width_expected"] == pytest.approx((hi - lo) / 2, rel=1e-9)


@pytest.mark.parametrize(
    ("analysis", "library"), [("wilson_interval", "wilson"), ("clopper_pearson_interval", "beta")]
)
def test_single_group_cell_answers_a_proportion_precision_question(analysis, library):
    # general-purpose library: statsmodels proportion_confint ('wilson'; 'beta' is
    # Clopper-Pearson) at the count n·p: the answered n's interval has a half-width ≤ 0.05 and
    # n − 1's does not; 10% dropout enrolls n / 0.9, rounded up.
    record = _answer(
        {
            "outcome": "binary",
            "layout": "single_group",
            "analysis": analysis,
            "hypothesis": {"aim": "estimation", "half_width": 0.05},
            "effect": {"p": 0.3},
            "adjustments": {"dropout": 0.1},
        }
    )

    def width(m: int) -> float:
        lo, hi = proportion_confint(m * 0.3, m, alpha=0.05, method=library)
        return (hi - lo) / 2

    analyzed = math.ceil(
        precision.proportion_interval_solution(
            0.3, 0.05, 0.95, library.replace("beta", "clopper_pearson")
        ).per_group[0]
        - 1e-9
    )
    assert width(analyzed) <= 0.05 < width(analyzed - 1)
    assert record["power"] is None
    assert record["method"]["analysis"] == analysis
    assert record["sample_size"]["per_group"] == [math.ceil(analyzed / 0.9 - 1e-9)]
    assert record["precision"]["half_width_target"] == 0.05
    assert record["precision"]["half_width_expected"] <= 0.05


def test_single_group_proportion_precision_defaults_to_wilson_and_refuses_p_null():
    q = {
        "outcome": "binary",
        "layout": "single_group",
        "hypothesis": {"aim": "estimation", "half_width": 0.05},
        "effect": {"p": 0.3},
    }
    assert _answer(q)["method"]["analysis"] == "wilson_interval"
    with pytest.raises(Exception, match="p_null"):
        load_question({**q, "assumptions": {"p_null": 0.2}})
