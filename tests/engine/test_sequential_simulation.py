"""The simulated group-sequential test (method simulation with an interim block, seqsim.py).

Checks:
- normal data: the simulated power, the stopping probabilities per look and the expected size
  agree within 4 Monte Carlo standard errors with the numerical integration of Armitage,
  McPherson & Rowe (1969) (*formula*; the boundaries themselves are checked against the
  published constants of Pocock 1977, O'Brien & Fleming 1979 and Jennison & Turnbull 2000
  in test_sequential.py), and the type I error with alpha;
- binary data (pooled z test), Pocock-type spending: the same agreement;
- a skewed data model (lognormal groups, Welch t, one-sided): no formula exists, so the engine's
  counts are checked against an independent simulation in this file that applies
  scipy.stats.ttest_ind (Welch) to the cumulative data at each look (*general-purpose library
  check*), and the honest result (a conservative sequential test) is what the record says;
- the n search of a simulated sequential design lands near the analytic maximum size (the
  fixed size × the inflation factor, Jennison & Turnbull 2000, ch. 2);
- refusals name the field (futility with simulation, log-rank, analyses with no per-look
  statistic).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from service.engine import compute
from service.engine.seqsim import look_sizes
from service.schemas.errors import QuestionInvalid
from service.schemas.question import load_question

REPS = 4000


def _both(body: dict) -> tuple[dict, dict]:
    """(the simulated record, the analytic record) of one question."""
    simulated = compute(
        load_question(
            {**body, "method": "simulation", "simulation": {"replicates": REPS, "seed": 11}}
        )
    )
    analytic = compute(load_question({**body, "method": "analytic"}))
    return simulated, analytic


def _within(estimate: float, expected: float, n: int, k: float = 4.0) -> None:
    mcse = math.sqrt(max(expected * (1 - expected), 1e-12) / n)
    assert abs(estimate - expected) <= k * mcse + 1e-12, (estimate, expected, mcse)


NORMAL = {
    "outcome": "continuous",
    "layout": "two_groups",
    "find": "power",
    "alpha": 0.05,
    "effect": {"difference": 0.45},
    "assumptions": {"sd": 1.0},
    "sample_size": {"per_group": [100, 100]},
    "interim": {"looks": 3, "efficacy_spending": "obrien_fleming"},
}


def test_normal_data_agree_with_numerical_integration():
    sim, exact = _both(NORMAL)
    # the analytic sequential power at the same sizes is printed beside the simulated one
    assert sim["power"]["analytic"] == pytest.approx(exact["power"]["estimate"], abs=1e-9)
    _within(sim["power"]["estimate"], exact["power"]["estimate"], REPS)
    _within(sim["type_i_error"]["estimate"], 0.05, REPS)
    s_looks, a_looks = sim["sequential"]["looks"], exact["sequential"]["looks"]
    assert [r["efficacy_z"] for r in s_looks] == pytest.approx([r["efficacy_z"] for r in a_looks])
    assert [r["per_group"] for r in s_looks] == [r["per_group"] for r in a_looks]
    for s, a in zip(s_looks, a_looks, strict=True):
        _within(s["stop_alternative"]["efficacy"], a["stop_alternative"]["efficacy"], REPS)
        _within(s["stop_null"]["efficacy"], a["stop_null"]["efficacy"], REPS)
    seq = sim["sequential"]
    for name in ("alternative", "null"):
        gap = abs(seq[f"expected_total_{name}"] - exact["sequential"][f"expected_total_{name}"])
        assert gap <= 4 * seq[f"expected_total_{name}_mcse"] + 1e-9
    # the counts are consistent: the stops per look add up to the rejections
    stops = sum(r["stop_alternative"]["efficacy"] for r in s_looks)
    assert stops == pytest.approx(sim["power"]["estimate"])
    assert seq["method"] == "simulation" and seq["replicates"] == REPS
    assert any("at every analysis" in note for note in sim["method"]["notes"])


def test_binary_pooled_z_agrees_with_numerical_integration():
    body = {
        "outcome": "binary",
        "layout": "two_groups",
        "find": "power",
        "alpha": 0.05,
        "effect": {"p_treatment": 0.45},
        "assumptions": {"p_control": 0.3},
        "sample_size": {"per_group": [160, 160]},
        "interim": {"looks": 4, "efficacy_spending": "pocock"},
    }
    sim, exact = _both(body)
    _within(sim["power"]["estimate"], exact["power"]["estimate"], REPS)
    _within(sim["type_i_error"]["estimate"], 0.05, REPS)
    for s, a in zip(sim["sequential"]["looks"], exact["sequential"]["looks"], strict=True):
        _within(s["stop_alternative"]["efficacy"], a["stop_alternative"]["efficacy"], REPS)


SKEWED = {
    "control": {"family": "lognormal", "mu": 0.0, "sigma": 1.0},
    "treatment": {"family": "lognormal", "mu": 0.5, "sigma": 1.0},
}


def _welch_by_scipy(n: int, fractions: list[float], upper: list[float], shift: float, seed: int):
    """Independent check: lognormal trials (treatment LN(0.5, 1) moved by ``shift``), scipy's
    Welch t at each look on the cumulative data, its one-sided p on the z scale against the
    boundaries; returns the share of trials stopping at each look."""
    rng = np.random.default_rng(seed)
    x = rng.lognormal(0.0, 1.0, (REPS, n))
    y = rng.lognormal(0.5, 1.0, (REPS, n)) + shift
    sizes = look_sizes(n, fractions)
    z = np.stack(
        [
            -stats.norm.ppf(
                stats.ttest_ind(
                    y[:, :m], x[:, :m], axis=1, equal_var=False, alternative="greater"
                ).pvalue
            )
            for m in sizes
        ],
        axis=1,
    )
    cross = z >= np.asarray(upper)
    first = cross.argmax(axis=1)
    return np.bincount(first[cross.any(axis=1)], minlength=len(sizes)) / REPS


def test_skewed_data_model_is_simulated_honestly():
    body = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "alpha": 0.025,
        "alternative": "one-sided",
        "analysis": "welch_t",
        "sample_size": {"per_group": [60, 60]},
        "interim": {"looks": 3},
        "method": "simulation",
        "simulation": {"replicates": REPS, "seed": 3, "data": SKEWED},
    }
    record = compute(load_question(body))
    seq = record["sequential"]
    fractions = [row["fraction"] for row in seq["looks"]]
    upper = [row["efficacy_z"] for row in seq["looks"]]
    assert "shape unchanged" in record["type_i_error"]["null_model"]
    # the null model is the treatment group moved onto the control mean, shape unchanged
    shift = math.exp(0.5 + 0.5) - math.exp(0.5)  # the lognormal means' difference
    null = _welch_by_scipy(60, fractions, upper, -shift, seed=101)
    alt = _welch_by_scipy(60, fractions, upper, 0.0, seed=102)
    for k, row in enumerate(seq["looks"]):
        for mine, theirs in (
            (row["stop_null"]["efficacy"], null[k]),
            (row["stop_alternative"]["efficacy"], alt[k]),
        ):
            p = (mine + theirs) / 2
            assert abs(mine - theirs) <= 4 * math.sqrt(max(p * (1 - p), 1e-6) * 2 / REPS)
    # the honest result: the Welch test on lognormal data holds its level conservatively
    # (sample variance grows with the mean), and the record's verdict says what was simulated
    size = record["type_i_error"]
    assert size["estimate"] < 0.025 and size["verdict"] in ("conservative", "holds")
    assert size["ci95"][0] <= size["estimate"] <= size["ci95"][1]
    assert "analytic" not in record["power"]  # a posted data model has no formula beside it


def test_sample_size_search_lands_near_the_inflated_size():
    body = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "alpha": 0.05,
        "target_power": 0.9,
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "interim": {"looks": 3},
    }
    exact = compute(load_question({**body, "method": "analytic"}))
    sim = compute(
        load_question(
            {**body, "method": "simulation", "simulation": {"replicates": 2000, "seed": 5}}
        )
    )
    n_exact, n_sim = exact["sample_size"]["per_group"][0], sim["sample_size"]["per_group"][0]
    assert abs(n_sim - n_exact) <= 0.08 * n_exact
    assert all(step["step"] != "interim" for step in sim["sample_size"]["steps"])
    assert sim["search"]["start"][0] == pytest.approx(
        exact["sample_size"]["steps"][0]["per_group_raw"][0]
    )


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        (
            {"alternative": "one-sided", "interim": {"looks": 2, "futility_spending": "pocock"}},
            "interim.futility_spending",
        ),
        (
            {"analysis": "ancova", "assumptions": {"sd": 1.0, "baseline_correlation": 0.5}},
            "analysis",
        ),
        (
            {
                "outcome": "time_to_event",
                "layout": "two_groups",
                "effect": {"hazard_ratio": 0.7},
                "assumptions": {
                    "time_unit": "months",
                    "control_median": 12,
                    "accrual": 12,
                    "follow_up": 12,
                },
            },
            "interim",
        ),
    ],
)
def test_simulated_refusals_name_the_field(changes, field):
    body = {**NORMAL, "method": "simulation", "simulation": {"replicates": 100, "seed": 1}}
    with pytest.raises(QuestionInvalid) as caught:
        load_question({**body, **changes})
    assert field in caught.value.errors, caught.value.errors
