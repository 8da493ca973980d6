"""Binary outcome, treatments against a shared control: the Dunnett-type critical value on the z
scale and the joint power against scipy's multivariate normal, one treatment group against the
two-proportion z test's power formula, the kernel's Holm and Hochberg decisions against
statsmodels, and the simulated power against the analytic power within 4 MCSE.

Sources (each check says which): scipy.stats.multivariate_normal.cdf (Genz's quasi-Monte Carlo
integration: *general-purpose library check*); the pooled two-proportion z test's power,
Φ((|Δ| − z·σ₀)/σ₁) (Fleiss, Levin & Paik 2003, *formula*); statsmodels multipletests (Holm;
Simes–Hochberg); Dunnett (1955) for the √k allocation, and Dunnett (1955), Table 1a, row
df = ∞, for the one-sided critical values on the z scale (*published*, recomputed).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from service.engine import compute, designs, manytoone
from service.engine.chunks import ChunkTask, Streams
from service.engine.designs import binary_treatments_vs_control as cell
from service.engine.kernels import kernel
from service.schemas import load_question
from service.schemas.errors import QuestionInvalid

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"
CELL = {"outcome": "binary", "layout": "treatments_vs_control"}


def _body(**over) -> dict:
    return {
        **CELL,
        "effect": {"p_treatment": 0.55},
        "assumptions": {"p_control": 0.4, "treatment_count": 3},
        **over,
    }


def _corr(per_group: list[float]) -> np.ndarray:
    lam = manytoone.lambdas(per_group)
    corr = np.outer(lam, lam)
    np.fill_diagonal(corr, 1.0)
    return corr


@pytest.mark.parametrize(
    ("per_group", "tails"),
    [([100, 100, 100, 100], 2), ([173, 100, 100, 100], 2), ([60, 40, 40], 1), ([50] * 6, 2)],
)
def test_dunnett_type_critical_value_against_scipy_multivariate_normal(per_group, tails):
    # scipy.stats.multivariate_normal.cdf: P(every |Zᵢ| ≤ c) (two-sided) or P(every Zᵢ ≤ c)
    # (one-sided) is 0.95 at the engine's critical value, correlations λᵢλⱼ.
    c = cell.critical("dunnett", 0.05, per_group, tails)
    k = len(per_group) - 1
    mvn = stats.multivariate_normal(mean=np.zeros(k), cov=_corr(per_group))
    lower = np.full(k, -c) if tails == 2 else np.full(k, -np.inf)
    inside = mvn.cdf(np.full(k, c), lower_limit=lower, rng=np.random.default_rng(3))
    assert inside == pytest.approx(0.95, abs=5e-4)
    # below Bonferroni's, above a single comparison's
    assert stats.norm.isf(0.05 / tails) < c < stats.norm.isf(0.05 / (tails * k))


@pytest.mark.parametrize(
    ("k", "printed"),
    # published: Dunnett (1955), JASA 50:1096-1121, Table 1a, one-sided, joint confidence .95,
    # row df = ∞ (the SD known, as on the z scale of the pooled z tests), two decimals as printed
    # (read from a textbook appendix's reprint; recomputed here: each rounds to the printed one)
    [(2, 1.92), (3, 2.06), (4, 2.16), (5, 2.23), (6, 2.29), (7, 2.34), (8, 2.38), (9, 2.42)],
)
def test_one_sided_critical_value_is_dunnetts_infinite_df_row(k, printed):
    c = cell.critical("dunnett", 0.05, [100] * (k + 1), 1)
    assert round(c, 2) == printed


@pytest.mark.parametrize(
    ("analysis", "goal", "per_group"),
    [
        ("dunnett", "any_treatment", [150, 150, 150, 150]),
        ("dunnett", "all_treatments", [260, 150, 150, 150]),
        ("bonferroni", "any_treatment", [200, 120, 120]),
    ],
)
def test_joint_power_against_scipy_multivariate_normal(analysis, goal, per_group):
    # scipy.stats.multivariate_normal.cdf of the k differences p̂ᵢ − p̂₀ (covariance p₀q₀/n₀
    # off the diagonal, p₀q₀/n₀ + pᵢqᵢ/nᵢ on it), accepted while |p̂ᵢ − p̂₀| < c·σ₀ᵢ.
    p0, p1 = 0.4, 0.55
    q = load_question(
        _body(
            find="power",
            analysis=analysis,
            sample_size={"per_group": per_group},
            analysis_options={"power_goal": goal},
            assumptions={"p_control": p0, "treatment_count": len(per_group) - 1},
        )
    )
    ours = compute(q)["power"]["estimate"]
    n0, rest = per_group[0], per_group[1:]
    k = len(rest)
    v0 = p0 * (1 - p0) / n0
    cov = np.full((k, k), v0) + np.diag([p1 * (1 - p1) / n for n in rest])
    c = cell.critical(analysis, 0.05, per_group, 2)
    edge = np.array(
        [
            c * math.sqrt(pb * (1 - pb) * (1 / n0 + 1 / n))
            for n, pb in ((n, (n0 * p0 + n * p1) / (n0 + n)) for n in rest)
        ]
    )
    mvn = stats.multivariate_normal(mean=np.full(k, p1 - p0), cov=cov)
    rng = np.random.default_rng(5)
    if goal == "any_treatment":
        expected = 1.0 - mvn.cdf(edge, lower_limit=-edge, rng=rng)
    else:  # every difference beyond its edge: all positive here (p1 > p0) or all negative
        upper_all = stats.multivariate_normal(mean=np.full(k, p0 - p1), cov=cov).cdf(-edge, rng=rng)
        lower_all = mvn.cdf(-edge, rng=rng)
        expected = upper_all + lower_all  # mixed signs: below 1e-6 at these sizes
    assert ours == pytest.approx(expected, abs=1e-3)


def test_one_treatment_group_is_the_pooled_z_test():
    # formula: Fleiss, Levin & Paik (2003): power ≈ Φ((|Δ| − z_{α/2}·σ₀)/σ₁) + the far tail,
    # σ₀ at the pooled proportion, σ₁ = √(p₀q₀/n₀ + p₁q₁/n₁).
    p0, p1, n = 0.3, 0.45, 160
    q = load_question(
        _body(
            find="power",
            effect={"p_treatment": p1},
            assumptions={"p_control": p0, "treatment_count": 1},
            sample_size={"per_group": [n, n]},
        )
    )
    pb = (p0 + p1) / 2
    s0 = math.sqrt(pb * (1 - pb) * 2 / n)
    s1 = math.sqrt((p0 * (1 - p0) + p1 * (1 - p1)) / n)
    z = stats.norm.isf(0.025)
    expected = stats.norm.cdf((abs(p1 - p0) - z * s0) / s1) + stats.norm.cdf(
        (-abs(p1 - p0) - z * s0) / s1
    )
    assert compute(q)["power"]["estimate"] == pytest.approx(expected, abs=1e-6)


ROWS = 40  # statsmodels' multipletests runs row by row


def test_kernel_decisions_match_statsmodels_multipletests():
    # statsmodels.stats.multitest.multipletests on the same counts: pooled z p-values from
    # scipy, Holm and Simes–Hochberg decisions, any / all rejected.
    per_group, p = [40, 40, 40, 40], [0.3, 0.45, 0.5, 0.35]
    streams = Streams(9, 0, 0)  # the kernel's own draws, made again
    counts = [streams.binomial(i, x, 40, ROWS) for i, x in enumerate(p)]
    pvals = []
    for i in range(1, 4):
        pb = (counts[0] + counts[i]) / 80
        z = (counts[i] - counts[0]) / 40 / np.sqrt(pb * (1 - pb) * (2 / 40))
        pvals.append(2 * stats.norm.sf(np.abs(z)))
    pvals = np.stack(pvals, axis=1)
    for analysis, method in (("holm", "holm"), ("hochberg", "simes-hochberg")):
        reject = np.array([multipletests(r, alpha=0.05, method=method)[0] for r in pvals])
        for goal in ("any_treatment", "all_treatments"):
            task = ChunkTask(
                kernel="many_to_one_binary",
                analysis=analysis,
                models=[{"family": "bernoulli", "p": x} for x in p],
                per_group=per_group,
                alpha=0.05,
                rule={
                    "aim": "superiority",
                    "alternative": "two-sided",
                    "direction": 1,
                    "margin": None,
                },
                settings={"power_goal": goal},
                summaries=True,
                seed=9,
                stream=0,
                chunk=0,
                chunk_size=ROWS,
                replicates=ROWS,
            )
            ours, _ = kernel("many_to_one_binary").run(Streams(9, 0, 0), task, ROWS)
            want = reject.any(axis=1) if goal == "any_treatment" else reject.all(axis=1)
            assert np.array_equal(ours, want)
            assert ours.any() and not ours.all()


@pytest.mark.parametrize(
    ("analysis", "goal", "allocation"),
    [
        ("dunnett", "any_treatment", "equal"),
        ("bonferroni", "all_treatments", "equal"),
        ("dunnett", "all_treatments", "square_root"),
    ],
)
def test_simulated_power_agrees_with_the_analytic_power(analysis, goal, allocation):
    per_group = [260, 150, 150, 150] if allocation == "square_root" else [150] * 4
    body = _body(
        find="power",
        analysis=analysis,
        sample_size={"per_group": per_group},
        analysis_options={"power_goal": goal, "control_allocation": allocation},
        method="simulation",
        simulation={"replicates": 4000, "seed": 20261202},
    )
    record = compute(load_question(body))
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
    size = record["type_i_error"]
    assert abs(size["estimate"] - 0.05) <= 4 * size["mcse"], size


def test_holm_and_hochberg_are_at_least_bonferroni():
    # Holm rejects whatever Bonferroni rejects and Hochberg whatever Holm rejects (same data:
    # common random numbers), so their simulated all-groups power is ordered.
    out = {}
    for analysis in ("bonferroni", "holm", "hochberg"):
        body = _body(
            find="power",
            analysis=analysis,
            sample_size={"per_group": [150] * 4},
            analysis_options={"power_goal": "all_treatments"},
            method="simulation",
            simulation={"replicates": 2000, "seed": 4},
        )
        out[analysis] = compute(load_question(body))["power"]["estimate"]
    assert out["bonferroni"] <= out["holm"] <= out["hochberg"]
    assert out["bonferroni"] < out["hochberg"]


def test_square_root_allocation_and_the_example():
    # Dunnett (1955): a control √k times each treatment group needs fewer subjects in total.
    equal = compute(load_question(_body(find="sample_size", target_power=0.8)))
    root = compute(
        load_question(
            _body(
                find="sample_size",
                target_power=0.8,
                analysis_options={"control_allocation": "square_root"},
            )
        )
    )
    assert root["sample_size"]["total"] < equal["sample_size"]["total"]
    design = designs.get("binary", "treatments_vs_control")
    example = json.loads((EXAMPLES / design.example).read_text())
    record = compute(load_question(example))
    per = record["sample_size"]["per_group"]
    assert len(per) == 4 and per[1] == per[2] == per[3] and per[0] > per[1]
    assert record["power"]["estimate"] >= 0.8


def test_effect_question_returns_the_proportion_that_reaches_the_target():
    q = load_question(
        _body(find="effect", effect=None, target_power=0.8, sample_size={"per_group": [150] * 4})
    )
    record = compute(q)
    value = record["effect"]["value"]
    assert 0.4 < value < 0.6
    assert record["power"]["estimate"] == pytest.approx(0.8, abs=1e-4)


def test_comparisons_adjustment_is_refused_naming_the_field():
    with pytest.raises((QuestionInvalid, Exception)) as caught:
        compute(load_question(_body(find="sample_size", adjustments={"comparisons": 3})))
    assert "adjustments.comparisons" in str(getattr(caught.value, "errors", "")) + str(
        getattr(caught.value, "field", "")
    )
