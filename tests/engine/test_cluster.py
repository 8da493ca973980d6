"""Cluster-randomized trials: whole clusters, cluster-level df, unequal sizes, fixed clusters."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from service.engine import cluster, cluster_sim
from service.engine.compute import compute
from service.engine.errors import QuestionError
from service.schemas import QuestionInvalid, load_question
from tests.engine.questions import make_q

TWO_GROUPS = ("continuous", "two_groups")
BINARY = ("binary", "two_groups")


def cq(cell=TWO_GROUPS, per_group=None, cl=None, **kw):
    """A question with clusters of 20 and ICC 0.05 unless told otherwise."""
    adj = {"cluster": {"mean_size": 20.0, "icc": 0.05, "cv": 0.0, **(cl or {})}}
    adj.update(kw.pop("adjustments", {}))
    return make_q(*cell, per_group=per_group, adjustments=adj, **kw)


def nct_cluster_power(diff, sd, k1, k2, m, icc, cv=0.0, alpha=0.05):
    """formula: noncentral t, df k₁ + k₂ − 2, ncp = δ/(σ·√(DE/m·(1/k₁ + 1/k₂))) (direct scipy)."""
    de = 1 + ((cv**2 + 1) * m - 1) * icc
    ncp = diff / (sd * math.sqrt(de / m * (1 / k1 + 1 / k2)))
    df = k1 + k2 - 2
    crit = stats.t.isf(alpha / 2, df)
    return float(stats.nct.sf(crit, df, ncp) + stats.nct.cdf(-crit, df, ncp))


# --- reference values ---------------------------------------------------------------------


def test_design_effect_donner_klar_and_eldridge():
    # formula: Donner & Klar (2000), 1 + (m − 1)·ICC: m = 20, ICC .05 → 1.95
    assert cluster.design_effect(20, 0.05) == 1.95
    # formula: Eldridge, Ashby & Kerry (2006), 1 + ((cv² + 1)·m − 1)·ICC: cv .5 → 2.2
    assert cluster.design_effect(20, 0.05, 0.5) == pytest.approx(1 + (1.25 * 20 - 1) * 0.05)


def test_donner_klar_example_in_whole_clusters():
    # Donner & Klar (2000): 63.77 × 1.95 = 124.4 individuals → 7 clusters of 20 by the normal
    # approximation; the cluster-level t with 2k − 2 df then needs one more cluster (exact below)
    rec = compute(cq())
    size = rec["sample_size"]
    de = next(s for s in size["steps"] if s["step"] == "design_effect")
    assert de["factor"] == 1.95
    assert de["per_group_raw"][0] == pytest.approx(124.34, abs=0.01)
    assert de["clusters_per_group"] == [7, 7]
    # formula: noncentral t at df 12 falls short at 7 clusters, reaches 0.80 at 8 (df 14)
    assert (
        nct_cluster_power(0.5, 1, 7, 7, 20, 0.05) < 0.8 <= nct_cluster_power(0.5, 1, 8, 8, 20, 0.05)
    )
    assert size["clusters_per_group"] == [8, 8]
    assert size["per_group"] == [160, 160] and size["total"] == 320  # 8 clusters × 20 people
    assert rec["power"]["estimate"] == pytest.approx(
        nct_cluster_power(0.5, 1, 8, 8, 20, 0.05), abs=1e-12
    )
    assert all("unit" in s for s in size["steps"])
    assert any("clusters per group" in w for w in rec["warnings"])


@pytest.mark.parametrize(
    ("k", "m", "icc", "cv"),
    [(4, 20, 0.05, 0.0), (6, 10, 0.1, 0.0), (12, 30, 0.02, 0.6), (20, 5, 0.2, 0.3)],
)
def test_power_with_cluster_df_matches_direct_nct(k, m, icc, cv):
    # formula: noncentral t with 2k − 2 df, effective n = k·m/DE (direct scipy.stats.nct)
    rec = compute(cq(per_group=[k * m, k * m], cl={"mean_size": m, "icc": icc, "cv": cv}))
    assert rec["power"]["estimate"] == pytest.approx(
        nct_cluster_power(0.5, 1.0, k, k, m, icc, cv), abs=1e-12
    )
    assert rec["sample_size"]["clusters_per_group"] == [k, k]


def test_few_clusters_power_is_not_overstated():
    # formula: with 3 clusters per group the cluster-level t (df 4) gives less power than the
    # individual-level t at the same effective n (df 2n − 2)
    rec = compute(cq(per_group=[60, 60], effect={"difference": 0.8}))
    n_eff = 60 / 1.95
    ncp = 0.8 / math.sqrt(2 / n_eff)
    df = 2 * n_eff - 2
    crit = stats.t.isf(0.025, df)
    individual = float(stats.nct.sf(crit, df, ncp))
    assert rec["power"]["estimate"] < individual - 0.05
    assert rec["power"]["estimate"] == pytest.approx(
        nct_cluster_power(0.8, 1.0, 3, 3, 20, 0.05), abs=1e-12
    )


def test_solve_is_the_smallest_whole_number_of_clusters():
    # exact: power at k clusters reaches the target, at k − 1 it does not
    for icc, cv in ((0.01, 0.0), (0.05, 0.7), (0.2, 0.0)):
        rec = compute(cq(cl={"icc": icc, "cv": cv}))
        k = rec["sample_size"]["clusters_per_group"][0]
        assert nct_cluster_power(0.5, 1, k, k, 20, icc, cv) >= 0.8
        assert nct_cluster_power(0.5, 1, k - 1, k - 1, 20, icc, cv) < 0.8


def test_fixed_clusters_solves_the_cluster_size():
    # exact: smallest whole m with power ≥ .80 at 10 clusters per group (direct scipy.stats.nct)
    q = cq(cl={"mean_size": None, "clusters_per_group": 10})
    q["adjustments"]["cluster"].pop("mean_size")
    rec = compute(q)
    size = rec["sample_size"]
    m = size["mean_cluster_size"]
    assert m == int(m)
    assert nct_cluster_power(0.5, 1, 10, 10, m, 0.05) >= 0.8
    assert nct_cluster_power(0.5, 1, 10, 10, m - 1, 0.05) < 0.8
    assert size["clusters_per_group"] == [10, 10] and size["per_group"] == [10 * m, 10 * m]


def test_fixed_clusters_says_when_no_size_is_enough():
    # Hemming et al. (2011): with k fixed, effective n → k/ICC as m grows; k = 4, ICC .05 caps
    # effective n at 80 per group, whose power at df 6 is below .80 (formula: noncentral t)
    q = cq(cl={"clusters_per_group": 4})
    q["adjustments"]["cluster"].pop("mean_size")
    cap = 0.5 / math.sqrt(2 * 0.05 / 4)
    assert float(stats.nct.sf(stats.t.isf(0.025, 6), 6, cap)) < 0.8
    with pytest.raises(QuestionError) as err:
        compute(q)
    assert err.value.field == "adjustments.cluster.clusters_per_group"
    assert "no cluster size is enough" in str(err.value)


def test_dropout_shrinks_the_analyzed_cluster_size():
    # formula: analyzed size 20·(1 − .2) = 16, DE 1 + 15·.05 = 1.75; clusters enrolled whole
    rec = compute(cq(per_group=[160, 160], adjustments={"dropout": 0.2}))
    assert rec["power"]["estimate"] == pytest.approx(
        nct_cluster_power(0.5, 1, 8, 8, 16, 0.05), abs=1e-12
    )
    de = next(s for s in rec["sample_size"]["steps"] if s["step"] == "design_effect")
    assert de["factor"] == 1.75 and de["analyzed_cluster_size"] == 16


def test_binary_two_groups_with_clusters():
    # formula: unpooled p(1 − p)·DE/(k·m) per group, noncentral t with 2k − 2 df
    rec = compute(
        cq(
            BINARY,
            per_group=[200, 200],
            effect={"p_treatment": 0.45},
            assumptions={"p_control": 0.3},
        )
    )
    se = math.sqrt((0.3 * 0.7 + 0.45 * 0.55) * 1.95 / 200)
    ncp, df = 0.15 / se, 18
    crit = stats.t.isf(0.025, df)
    assert rec["power"]["estimate"] == pytest.approx(
        float(stats.nct.sf(crit, df, ncp) + stats.nct.cdf(-crit, df, ncp)), abs=1e-12
    )
    rec = compute(cq(BINARY, effect={"p_treatment": 0.45}, assumptions={"p_control": 0.3}))
    k = rec["sample_size"]["clusters_per_group"][0]
    assert rec["sample_size"]["per_group"] == [20 * k, 20 * k]


def test_partial_clusters_and_other_cells_are_refused():
    with pytest.raises(QuestionError) as err:
        compute(cq(per_group=[125, 125]))
    assert err.value.field == "sample_size.per_group" and "120 or 140" in str(err.value)
    with pytest.raises(QuestionError) as err:
        compute(
            make_q(
                "continuous",
                "single_group",
                adjustments={"cluster": {"mean_size": 20, "icc": 0.05}},
            )
        )
    assert err.value.field == "adjustments.cluster"


def test_find_effect_with_clusters_reaches_the_target():
    # formula: the solved difference gives noncentral-t power .80 at 8 clusters of 20
    rec = compute(cq(per_group=[160, 160], find="effect"))
    d = rec["effect"]["value"]
    assert nct_cluster_power(d, 1, 8, 8, 20, 0.05) == pytest.approx(0.8, abs=1e-6)


def test_schema_cluster_block():
    base = {
        "outcome": "continuous",
        "layout": "two_groups",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
    }
    q = load_question({**base, "adjustments": {"cluster": {"mean_size": 20, "icc": 0.05}}})
    assert q["adjustments"]["cluster"]["cv"] == 0.0
    q = load_question({**base, "adjustments": {"cluster": {"clusters_per_group": 12, "icc": 0.05}}})
    assert q["adjustments"]["cluster"]["clusters_per_group"] == 12
    for bad, field in (
        ({"icc": 0.05}, "mean_size"),
        ({"mean_size": 20, "icc": 0.05, "clusters_per_group": 5}, "clusters_per_group"),
        ({"mean_size": 20, "icc": 0.05, "cv": -0.1}, "cv"),
    ):
        with pytest.raises(QuestionInvalid) as err:
            load_question({**base, "adjustments": {"cluster": bad}})
        assert field in str(err.value.messages if hasattr(err.value, "messages") else err.value)


# --- simulation against the analytic answer -------------------------------------------------


def _sim(q, reps=4000):
    q["method"] = "simulation"
    q["simulation"] = {
        "replicates": reps,
        "seed": 20261202,
        "data": None,
        "decision_rule": "point",
        "chunk_size": 1000,
        "search_replicates": 2000,
    }
    return compute(q)


@pytest.mark.parametrize(
    ("cell", "per_group", "cl", "values"),
    [
        (TWO_GROUPS, [40, 40], {}, {"difference": 1.2}),  # boundary: 2 clusters per group, df 2
        (TWO_GROUPS, [60, 60], {}, {"difference": 0.8}),  # few clusters: 3 per group, df 4
        (TWO_GROUPS, [120, 240], {"cv": 0.4}, {"difference": 0.45}),  # 6 vs 12 clusters
        (TWO_GROUPS, [80, 80], {"mean_size": 10, "icc": 0.1}, {"difference": 0.6}),
        (TWO_GROUPS, [240, 240], {"cv": 0.6, "icc": 0.03}, {"difference": 0.35}),  # unequal
        (TWO_GROUPS, [200, 200], {"icc": 0.0}, {"difference": 0.3}),  # boundary ICC 0
        (TWO_GROUPS, [200, 200], {}, {"difference": 0.0}),  # boundary: no effect → alpha
        (
            BINARY,
            [300, 300],
            {"mean_size": 30, "icc": 0.05},
            {"p_control": 0.3, "p_treatment": 0.45},
        ),
        (
            BINARY,
            [400, 400],
            {"cv": 0.5, "icc": 0.02},
            {"p_control": 0.2, "p_treatment": 0.3},
        ),
    ],
)
def test_simulated_power_agrees_with_analytic(cell, per_group, cl, values):
    # the cluster-level simulation against the noncentral t formula, within 4 MCSE
    rec = _sim(cq(cell, per_group=per_group, cl=cl, values=values))
    p = rec["power"]
    assert abs(p["estimate"] - p["analytic"]) <= 4 * max(p["mcse"], 0.0035)
    assert rec["type_i_error"]["estimate"] == pytest.approx(0.05, abs=4 * 0.0035)


def test_simulated_sample_size_in_whole_clusters():
    # analytic 8 clusters of 20 (above); the simulated search lands within one cluster of it
    rec = _sim(cq(), reps=4000)
    k = rec["sample_size"]["clusters_per_group"][0]
    assert abs(k - 8) <= 1
    assert rec["sample_size"]["per_group"] == [20 * k, 20 * k]


def test_cluster_t_equal_sizes_is_the_t_test_on_cluster_means():
    # scipy.stats.ttest_ind on cluster means (pooled variance) as the reference
    rng = np.random.default_rng(3)
    y1, y2 = rng.normal(size=(5, 6)), rng.normal(0.3, 1, size=(5, 7))
    m1, m2 = np.full((5, 6), 20.0), np.full((5, 7), 20.0)
    est, se, df = cluster_sim.cluster_t(y1, m1, y2, m2)
    ref = stats.ttest_ind(y2, y1, axis=1)
    assert np.allclose(est / se, ref.statistic) and df == 11


def test_gamma_sizes_have_the_stated_mean_and_cv():
    # exact moments of the gamma: mean m, cv; rounding changes them by well under 1 %
    s = cluster_sim.sizes(np.random.default_rng(1), 40.0, 0.5, (200_000, 1))
    assert s.mean() == pytest.approx(40.0, rel=0.01)
    assert s.std() / s.mean() == pytest.approx(0.5, rel=0.02)


def test_noninferiority_with_clusters_matches_direct_nct():
    # formula: one-sided noncentral t, df 2k − 2, ncp = (δ − margin)/se with se from k·m/DE
    q = cq(
        per_group=[300, 300],
        effect={"difference": 0.0},
        hypothesis={"aim": "noninferiority", "margin": -0.3},
    )
    rec = compute(q)
    se = math.sqrt(2 * 1.95 / 300)
    crit = stats.t.isf(0.05, 28)
    assert rec["power"]["estimate"] == pytest.approx(
        float(stats.nct.sf(crit, 28, 0.3 / se)), abs=1e-12
    )
    sim = _sim(q)
    p = sim["power"]
    assert abs(p["estimate"] - p["analytic"]) <= 4 * p["mcse"]


def test_cost_estimate_counts_clusters_not_people():
    # exact: 3 draws per cluster per replicate, two streams (alternative and null)
    from service.engine import simulate

    q = cq(per_group=[160, 160])
    q["method"] = "simulation"
    q["simulation"] = {"replicates": 1000, "seed": 1, "data": None}
    assert simulate.estimate_cost(q) == 2 * 1000 * 3 * 16


def test_simulation_refusals_name_the_field():
    # common practice, no source: what the cluster simulation cannot do is refused clearly
    q = cq(per_group=[160, 160])
    q["method"] = "simulation"
    q["simulation"] = {"replicates": 100, "seed": 1, "data": None, "chunk_size": 100}
    q["analysis"] = "rank_sum"
    with pytest.raises(QuestionError) as err:
        compute(q)
    assert err.value.field == "analysis"
    q["analysis"] = "pooled_t"
    q["simulation"].update(
        data={
            "control": {"family": "normal", "mean": 0, "sd": 1},
            "treatment": {"family": "normal", "mean": 0.5, "sd": 1},
        },
    )
    with pytest.raises(QuestionError) as err:
        compute(q)
    assert err.value.field == "simulation.data"


def test_robustness_panel_is_refused_for_cluster_questions():
    # common practice, no source: the panel's departures are individual-level data models
    from service.engine import explore

    with pytest.raises(QuestionError) as err:
        explore.robustness(cq(), [160, 160], replicates=200, seed=1)
    assert err.value.field == "adjustments.cluster"
