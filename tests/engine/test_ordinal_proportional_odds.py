"""Ordinal × two_groups under proportional odds (Whitehead 1993): the sample-size formula, the
data model it assumes (checked with statsmodels' ordinal regression), the rank-sum cross-check
and the simulated score test against the analytic power."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from scipy import special, stats
from statsmodels.miscmodels.ordinal_model import OrderedModel

from service.engine import compute
from service.engine.designs import get
from service.engine.designs.ordinal_two_groups import po_treatment_probs
from service.schemas import QuestionInvalid, load_question

DESIGN = get("ordinal", "two_groups")
PROBS = [0.15, 0.25, 0.3, 0.2, 0.1]


def body(odds_ratio=1.6, probs=None, **over) -> dict:
    out = {
        "outcome": "ordinal",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"odds_ratio": odds_ratio},
        "assumptions": {"category_probs": list(probs or PROBS)},
    }
    out.update(over)
    return out


def answer(b: dict) -> dict:
    return compute(load_question(b))


def _treatment(probs, odds_ratio):
    """Independent of the engine: shift the control cumulative logits down by ln OR."""
    cum = np.cumsum(probs)[:-1]
    cum_t = special.expit(special.logit(cum) - math.log(odds_ratio))
    return np.diff(np.concatenate(([0.0], cum_t, [1.0])))


@pytest.mark.parametrize(
    "odds_ratio,probs,power,ratio",
    [
        (1.6, PROBS, 0.9, 1.0),
        (0.5, [0.2, 0.5, 0.2, 0.1], 0.8, 1.0),
        (2.0, [0.3, 0.4, 0.3], 0.8, 2.0),
    ],
)
def test_whitehead_sample_size_formula(odds_ratio, probs, power, ratio):
    # formula: Whitehead (1993), Stat Med 12:2257, N = 3(A + 1)²(zα/2 + zβ)² /
    # (A·(ln OR)²·(1 − Σ p̄³)), A = n_treatment / n_control; for A = 1 it is 6(...)²/(...) per
    # group. p̄ averaged over the groups with the allocation weights; computed here with scipy.
    pt = _treatment(probs, odds_ratio)
    pbar = (np.asarray(probs) + ratio * pt) / (1 + ratio)
    z = stats.norm.isf(0.025) + stats.norm.ppf(power)
    total = (
        3 * (ratio + 1) ** 2 * z**2 / (ratio * math.log(odds_ratio) ** 2 * (1 - np.sum(pbar**3)))
    )
    record = answer(body(odds_ratio, probs, target_power=power, allocation_ratio=ratio))
    n_control = total / (1 + ratio)
    assert record["sample_size"]["per_group"][0] == math.ceil(n_control - 1e-9)
    assert record["method"]["analysis"] == "proportional_odds"
    if ratio == 1.0:
        per_group = 6 * z**2 / (math.log(odds_ratio) ** 2 * (1 - np.sum(pbar**3)))
        assert record["sample_size"]["per_group"] == [math.ceil(per_group)] * 2


def test_treatment_categories_are_a_proportional_odds_model():
    # General-purpose library: statsmodels' OrderedModel (logit) fitted to counts in proportion
    # to the control and the implied treatment category probabilities recovers ln OR (rounded
    # counts of 2000 per group, hence the 0.005).
    odds_ratio = 1.6
    pt = po_treatment_probs(PROBS, odds_ratio)
    assert np.allclose(pt, _treatment(PROBS, odds_ratio), atol=1e-12)
    m = 2000
    counts_c = np.round(np.asarray(PROBS) * m).astype(int)
    counts_t = np.round(np.asarray(pt) * m).astype(int)
    y = np.concatenate([np.repeat(np.arange(5), counts_c), np.repeat(np.arange(5), counts_t)])
    x = np.concatenate([np.zeros(counts_c.sum()), np.ones(counts_t.sum())])
    fit = OrderedModel(y, x[:, None], distr="logit").fit(method="bfgs", disp=False)
    assert fit.params[0] == pytest.approx(math.log(odds_ratio), abs=0.005)


def test_whitehead_and_a_tie_corrected_noether_agree_for_a_modest_odds_ratio():
    # Independent computation: Noether's (1987) rank-sum size from P(Y > X) + ½P(Y = X) of the
    # same two category distributions, its null variance corrected for ties by 1 − Σ p̄³
    # (Lehmann 1975, ch. 1). Both approximate the same test near OR = 1 (the PO score test is
    # the Mann-Whitney test); 2% is common practice, no source.
    odds_ratio = 1.4
    pt = _treatment(PROBS, odds_ratio)
    pc = np.asarray(PROBS)
    cum_c = np.concatenate(([0.0], np.cumsum(pc)[:-1]))
    p_sup = float(np.sum(pt * cum_c) + 0.5 * np.sum(pt * pc))
    ties = 1 - np.sum(((pc + pt) / 2) ** 3)
    z = stats.norm.isf(0.025) + stats.norm.ppf(0.8)
    noether_total = z**2 * ties / (3 * (p_sup - 0.5) ** 2)
    whitehead = answer(body(odds_ratio))["sample_size"]["per_group"][0]
    assert whitehead == pytest.approx(noether_total / 2, rel=0.02)


def test_probabilities_not_summing_to_one_are_refused_on_the_field():
    with pytest.raises(QuestionInvalid) as info:
        load_question(body(probs=[0.2, 0.3, 0.3]))
    assert "assumptions.category_probs" in info.value.errors
    assert "sum to 1" in " ".join(info.value.errors["assumptions.category_probs"])


def test_an_odds_ratio_of_one_is_refused():
    with pytest.raises(QuestionInvalid) as info:
        load_question(body(odds_ratio=1.0))
    assert "effect.odds_ratio" in info.value.errors


def test_odds_ratio_with_rank_sum_is_refused_on_the_analysis():
    with pytest.raises(Exception) as info:
        answer(body(analysis="rank_sum"))
    assert "analysis" in str(getattr(info.value, "errors", info.value))


def test_the_rank_sum_form_is_unchanged():
    # Noether's form still answers with prob_superiority alone (no category_probs).
    record = answer(
        {
            "outcome": "ordinal",
            "layout": "two_groups",
            "find": "sample_size",
            "effect": {"prob_superiority": 0.64},
        }
    )
    assert record["method"]["analysis"] == "rank_sum"


@pytest.mark.parametrize(
    "odds_ratio,probs,size",
    [(1.6, PROBS, [120, 120]), (0.45, [0.3, 0.4, 0.2, 0.1], [60, 90])],
)
def test_simulated_proportional_odds_agrees_with_whitehead(odds_ratio, probs, size):
    b = body(odds_ratio, probs, find="power", sample_size={"per_group": size})
    sim = copy.deepcopy(b)
    sim.update(method="simulation", simulation={"replicates": 4000, "seed": 20261202})
    record = answer(sim)
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
    assert record["method"]["data"]["odds_ratio"] == pytest.approx(odds_ratio)
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")


def test_detectable_odds_ratio_round_trips_through_whitehead_formula():
    # formula: the odds ratio solved at 150 per group gives back 150 per group from Whitehead's
    # sample-size formula (Whitehead 1993), and lower-is-better solves below 1.
    record = answer(
        {
            "outcome": "ordinal",
            "layout": "two_groups",
            "find": "effect",
            "sample_size": {"per_group": [150, 150]},
            "assumptions": {"category_probs": PROBS},
        }
    )
    found = record["effect"]
    assert found["field"] == "odds_ratio" and found["value"] > 1
    raw = DESIGN.solve_n(load_question(body(found["value"])), 0.05).per_group
    assert raw[0] == pytest.approx(150, rel=1e-4)  # the power counts both tails
    lower = answer(
        {
            "outcome": "ordinal",
            "layout": "two_groups",
            "find": "effect",
            "sample_size": {"per_group": [150, 150]},
            "assumptions": {"category_probs": PROBS},
            "hypothesis": {"higher_is_better": False},
        }
    )
    assert lower["effect"]["value"] < 1
