"""Continuous outcome, treatments against a shared control: Dunnett's critical value and power,
Bonferroni, Holm and Hochberg, against published values, scipy, statsmodels and simulation."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from service.engine import compute, manytoone
from service.schemas import load_question

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"
CELL = {"outcome": "continuous", "layout": "treatments_vs_control"}


def _question(**over) -> dict:
    raw = {
        **CELL,
        "effect": {"difference": 1.0},
        "assumptions": {"sd": 2.0, "treatment_count": 3},
        **over,
    }
    return load_question(raw)


# --- reference values ----------------------------------------------------------------------

# Dunnett's (1955) table grid (k treatment groups, error df, tails) at alpha 0.05 with equal
# groups, checked here by scipy's multivariate t (or normal, df ∞) cdf; the printed one-sided
# values are checked below (test_dunnett_one_sided_table); the two-sided table (Dunnett 1964,
# which replaced the approximate two-sided values of 1955) is not held, so the two-sided cells
# are checked by scipy only.
DUNNETT_GRID = [
    (2, 10, 2),
    (3, 20, 2),
    (9, math.inf, 2),
    (2, 10, 1),
    (4, 60, 1),
    (9, math.inf, 1),
]


@pytest.mark.parametrize(("k", "df", "tails"), DUNNETT_GRID)
def test_dunnett_critical_values_against_scipy(k, df, tails):
    # scipy.stats.multivariate_t / multivariate_normal cdf (Genz): P(every |Tᵢ| ≤ c), or every
    # Tᵢ ≤ c one-sided, is 0.95 at the engine's value; equal groups: correlation ½.
    df_engine = manytoone.NORMAL_DF if math.isinf(df) else df
    c = manytoone.dunnett_critical(0.05, [10.0] * (k + 1), df_engine, tails)
    corr = np.full((k, k), 0.5)
    np.fill_diagonal(corr, 1.0)
    lower = np.full(k, -c) if tails == 2 else np.full(k, -np.inf)
    if math.isinf(df):
        law = stats.multivariate_normal(mean=np.zeros(k), cov=corr)
        inside = law.cdf(np.full(k, c), lower_limit=lower, rng=np.random.default_rng(11))
    else:
        law = stats.multivariate_t(shape=corr, df=df)
        inside = law.cdf(np.full(k, c), lower_limit=lower, random_state=11)
    assert inside == pytest.approx(0.95, abs=1e-3)


# published: Dunnett (1955), JASA 50:1096-1121, Table 1a: one-sided many-to-one critical values,
# joint confidence .95 (alpha 0.05), equal groups, k treatment groups beside the control, two
# decimals as printed (read from a textbook appendix's reprint of the table, credited to JASA
# 50, pp. 1112-1118; recomputed here: each value rounds to the printed one).
DUNNETT_ONE_SIDED = {
    5: {2: 2.44, 3: 2.68, 4: 2.85, 5: 2.98, 9: 3.30},
    10: {2: 2.15, 3: 2.34, 4: 2.47, 5: 2.56, 9: 2.81},
    20: {2: 2.03, 3: 2.19, 4: 2.30, 5: 2.39, 9: 2.60},
    60: {2: 1.95, 3: 2.10, 4: 2.21, 5: 2.28, 9: 2.48},
    math.inf: {2: 1.92, 3: 2.06, 4: 2.16, 5: 2.23, 9: 2.42},
}


@pytest.mark.parametrize(
    ("df", "k", "printed"),
    [(df, k, value) for df, row in DUNNETT_ONE_SIDED.items() for k, value in row.items()],
)
def test_dunnett_one_sided_table(df, k, printed):
    # published (recomputed): Dunnett (1955), Table 1a, at the printed precision
    df_engine = manytoone.NORMAL_DF if math.isinf(df) else df
    c = manytoone.dunnett_critical(0.05, [10.0] * (k + 1), df_engine, 1)
    assert round(c, 2) == printed


@pytest.mark.parametrize(
    ("k", "n", "printed"),
    [
        # published: Dunnett (1955), Table 1a, the cells whose error df N − k − 1 equal groups
        # of n reach: (k + 1)(n − 1) = 20, 10 or 60
        (3, 6, 2.19),  # df 20
        (4, 5, 2.30),  # df 20
        (4, 3, 2.47),  # df 10
        (9, 2, 2.81),  # df 10
        (2, 21, 1.95),  # df 60
        (5, 11, 2.28),  # df 60
    ],
)
def test_cell_critical_value_at_its_error_df(k, n, printed):
    # the continuous cell's own critical value (its error df rule N − k − 1 included), one-sided
    from service.engine.designs import continuous_treatments_vs_control as cell

    assert round(cell.critical("dunnett", 0.05, [n] * (k + 1), 1), 2) == printed


@pytest.mark.parametrize("per_group", [[20, 20, 20, 20], [35, 20, 20, 20], [30, 12, 18]])
def test_critical_value_against_scipy_multivariate_t(per_group):
    # scipy.stats.multivariate_t.cdf (Genz's quasi-Monte Carlo) at Dunnett's critical value:
    # P(every |Tᵢ| ≤ c) = 0.95 with correlations 1/√((1 + n₀/nᵢ)(1 + n₀/nⱼ)).
    n0, rest = per_group[0], per_group[1:]
    lam = np.array([1 / math.sqrt(1 + n0 / n) for n in rest])
    corr = np.outer(lam, lam)
    np.fill_diagonal(corr, 1.0)
    df = sum(per_group) - len(per_group)
    c = manytoone.dunnett_critical(0.05, per_group, df, 2)
    k = len(rest)
    mvt = stats.multivariate_t(shape=corr, df=df)
    inside = mvt.cdf(np.full(k, c), lower_limit=np.full(k, -c), random_state=11)
    assert inside == pytest.approx(0.95, abs=5e-4)


def test_p_values_against_scipy_dunnett():
    # scipy.stats.dunnett (scipy ≥ 1.11) on one simulated data set of 3 treatment groups and a
    # larger control: its p-values are P(max |Tⱼ| ≥ |tᵢ|), the same joint law as ours.
    rng = np.random.default_rng(2026)
    control = rng.normal(0.0, 2.0, 30)
    treated = [rng.normal(d, 2.0, 18) for d in (0.4, 1.0, 1.6)]
    res = stats.dunnett(*treated, control=control, random_state=5)
    sizes = [30, 18, 18, 18]
    lam = manytoone.lambdas(sizes)
    df = sum(sizes) - 4
    for t, p in zip(res.statistic, res.pvalue, strict=True):
        ours = 1.0 - manytoone.prob_none(abs(t), lam, np.zeros(3), df, 2)
        assert ours == pytest.approx(p, abs=2e-3)


def test_holm_and_hochberg_match_statsmodels():
    # statsmodels.stats.multitest.multipletests on random p-values: any/all rejected.
    rng = np.random.default_rng(7)
    p = rng.beta(0.3, 1.0, size=(40, 4))
    for procedure, method in (("holm", "holm"), ("hochberg", "simes-hochberg")):
        reject = np.array([multipletests(row, alpha=0.05, method=method)[0] for row in p])
        any_ = manytoone.stepwise_success(p, 0.05, procedure, "any_treatment")
        all_ = manytoone.stepwise_success(p, 0.05, procedure, "all_treatments")
        assert np.array_equal(any_, reject.any(axis=1))
        assert np.array_equal(all_, reject.all(axis=1))
        assert any_.any() and not any_.all() and all_.any()


def test_one_treatment_group_is_the_t_test():
    # formula: with k = 1 Dunnett's test is the two-sample t test (noncentral t power).
    q = _question(
        assumptions={"sd": 2.0, "treatment_count": 1},
        find="power",
        sample_size={"per_group": [40, 40]},
    )
    power = compute(q)["power"]["estimate"]
    df, nc = 78, 1.0 / (2.0 * math.sqrt(2 / 40))
    crit = stats.t.isf(0.025, df)
    assert power == pytest.approx(
        stats.nct.sf(crit, df, nc) + stats.nct.cdf(-crit, df, nc), abs=1e-6
    )


def test_square_root_allocation_needs_fewer_in_total():
    # Dunnett (1955): a control √k times each treatment group minimizes the comparisons' variance.
    equal = compute(_question())["sample_size"]["total"]
    root = compute(_question(analysis_options={"control_allocation": "square_root"}))
    assert root["sample_size"]["total"] < equal
    per = root["sample_size"]["per_group"]
    assert per[0] / per[1] == pytest.approx(math.sqrt(3), rel=0.06)


def test_conjunctive_needs_more_than_disjunctive_and_bonferroni_more_than_dunnett():
    any_ = compute(_question())["sample_size"]["per_group"]
    all_ = compute(_question(analysis_options={"power_goal": "all_treatments"}))
    bonf = compute(_question(analysis="bonferroni"))["sample_size"]["per_group"]
    assert all_["sample_size"]["per_group"][1] > any_[1]
    assert bonf[1] >= any_[1]


def test_find_effect_reaches_the_target():
    q = _question(find="effect", effect={}, sample_size={"per_group": [50, 50, 50, 50]})
    record = compute(q)
    assert record["effect"]["field"] == "difference"
    assert record["power"]["estimate"] == pytest.approx(0.8, abs=1e-6)


def test_comparisons_adjustment_is_refused():
    from service.engine import QuestionError

    q = _question(adjustments={"comparisons": 3})
    with pytest.raises(QuestionError) as err:
        compute(q)
    assert err.value.field == "adjustments.comparisons"


# --- simulation against the formula --------------------------------------------------------


def _simulated(analysis: str, goal: str, seed: int = 3) -> dict:
    q = _question(
        find="power",
        analysis=analysis,
        analysis_options={"power_goal": goal, "control_allocation": "square_root"},
        sample_size={"per_group": [40, 23, 23, 23]},
        method="simulation",
        simulation={"replicates": 4000, "seed": seed},
    )
    return compute(q)


@pytest.mark.parametrize(
    ("analysis", "goal"),
    [
        ("dunnett", "any_treatment"),
        ("dunnett", "all_treatments"),
        ("bonferroni", "any_treatment"),
        ("bonferroni", "all_treatments"),
    ],
)
def test_simulation_agrees_with_the_multivariate_t(analysis, goal):
    record = _simulated(analysis, goal)
    power = record["power"]
    analytic = compute(
        _question(
            find="power",
            analysis=analysis,
            analysis_options={"power_goal": goal, "control_allocation": "square_root"},
            sample_size={"per_group": [40, 23, 23, 23]},
        )
    )["power"]["estimate"]
    assert abs(power["estimate"] - analytic) <= 4 * power["mcse"]
    # the type I error is the familywise rate, alpha for both procedures (Bonferroni ≤ alpha)
    t1 = record["type_i_error"]
    assert t1["verdict"] in ("holds", "conservative")
    if analysis == "dunnett":
        assert abs(t1["estimate"] - 0.05) <= 4 * t1["mcse"]


def test_holm_any_is_bonferroni_any_and_step_procedures_gain_on_all():
    # Holm rejects something exactly when the smallest p is below α/k, as Bonferroni does
    # (Holm 1979); for every treatment group both step procedures beat Bonferroni.
    holm = _simulated("holm", "any_treatment")["power"]
    bonf = _simulated("bonferroni", "any_treatment")["power"]
    assert holm["estimate"] == bonf["estimate"]
    # the analytic figure printed beside a Holm answer is Bonferroni's (equal here)
    assert holm["analytic"] == bonf["analytic"]
    bonf_all = _simulated("bonferroni", "all_treatments")["power"]["estimate"]
    holm_all = _simulated("holm", "all_treatments")["power"]["estimate"]
    hoch_all = _simulated("hochberg", "all_treatments")["power"]["estimate"]
    assert bonf_all < holm_all <= hoch_all


def test_example_through_the_engine():
    raw = json.loads((EXAMPLES / "northbridge_analgesia_three_doses.json").read_text())
    record = compute(load_question(raw))
    per = record["sample_size"]["per_group"]
    assert len(per) == 4 and per[0] > per[1] == per[2] == per[3]
    assert record["power"]["estimate"] >= 0.8
