"""Assurance: the power averaged over a normal or truncated normal prior on the effect
(O'Hagan, Stevens & Campbell 2005), against their closed form and Monte Carlo."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from service.engine import assurance as assure
from service.engine import compute
from service.engine.designs import get
from service.engine.errors import QuestionError
from service.schemas.question import load_question


def ask(question: dict) -> dict:
    return compute(load_question(question))


def z_question(n: int, prior: dict) -> dict:
    return {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "alpha": 0.025,
        "alternative": "one-sided",
        "effect": {"difference": 0.1},
        "assumptions": {"sd": 1.0},
        "sample_size": {"per_group": [n, n]},
        "assurance": prior,
    }


@pytest.mark.parametrize(("mean", "sd"), [(0.1, 0.03), (0.08, 0.02)])
def test_closed_form_normal_prior(mean, sd):
    # formula: O'Hagan, Stevens & Campbell (2005), Pharm Stat 4:187, eq. for a z test with a
    # N(m, v) prior: assurance = Φ((m − z_α·se) / √(se² + v)), se = σ√(2/n). At n = 2000 per
    # group the noncentral t power equals the z power to about 1e-5, and the prior's mass
    # below 0 (left out: no success there) is under 5e-4 times a power below alpha.
    n = 2000
    se = math.sqrt(2 / n)
    closed = stats.norm.cdf((mean - stats.norm.ppf(0.975) * se) / math.sqrt(se**2 + sd**2))
    record = ask(z_question(n, {"mean": mean, "sd": sd}))
    assert record["assurance"]["estimate"] == pytest.approx(closed, abs=2e-4)
    assert record["assurance"]["power"] == record["power"]["estimate"]


def test_monte_carlo_trials_agree():
    # Monte Carlo: draw the effect from the prior, then the trial's z statistic; the share of
    # significant results in the beneficial direction is the assurance (within 4 MCSE).
    n, mean, sd = 2000, 0.1, 0.05
    se = math.sqrt(2 / n)
    rng = np.random.default_rng(20261202)
    effect = rng.normal(mean, sd, 200_000)
    z = rng.normal(effect / se, 1.0)
    win = (z > stats.norm.ppf(0.975)) & (effect > 0)
    mc, mcse = win.mean(), win.std() / math.sqrt(win.size)
    got = ask(z_question(n, {"mean": mean, "sd": sd}))["assurance"]["estimate"]
    assert abs(got - mc) < 4 * mcse


def test_truncated_prior_binary_against_monte_carlo_average():
    # Monte Carlo: the average analytic power over draws from the truncated normal prior
    # (scipy.stats.truncnorm) equals the integral within 4 MCSE.
    question = {
        "outcome": "binary",
        "layout": "two_groups",
        "find": "power",
        "effect": {"p_treatment": 0.45},
        "assumptions": {"p_control": 0.3},
        "sample_size": {"per_group": [150, 150]},
        "assurance": {"mean": 0.42, "sd": 0.08, "lower": 0.3, "upper": 0.7},
    }
    q = load_question(question)
    record = compute(q)
    design = get("binary", "two_groups")
    a, b = (0.3 - 0.42) / 0.08, (0.7 - 0.42) / 0.08
    draws = stats.truncnorm.rvs(a, b, loc=0.42, scale=0.08, size=4000, random_state=5)
    powers = np.array(
        [design.power(assure._at(q, design, float(x)), [150, 150], 0.05) for x in draws]
    )
    mcse = powers.std() / math.sqrt(powers.size)
    assert abs(record["assurance"]["estimate"] - powers.mean()) < 4 * mcse
    assert record["assurance"]["ceiling"] == pytest.approx(1.0)  # truncated at p_control


def test_assurance_is_below_power_and_target_size_reaches_it():
    question = z_question(64, {"mean": 0.5, "sd": 0.2, "target": 0.7})
    question["effect"] = {"difference": 0.5}
    record = ask(question)
    a = record["assurance"]
    assert a["estimate"] < record["power"]["estimate"]
    n = a["target_per_group"]
    q = load_question({**question, "sample_size": {"per_group": n}})
    design = get("continuous", "two_groups")
    assert assure.assurance(q, design, n, 0.025) >= 0.7
    assert assure.assurance(q, design, [n[0] - 1, n[1] - 1], 0.025) < 0.7


def test_unreachable_target_is_said():
    # the prior puts 1 − Φ(0.5/0.5) = 15.9% on harm: 90% assurance is out of reach
    question = z_question(64, {"mean": 0.5, "sd": 0.5, "target": 0.9})
    question["effect"] = {"difference": 0.5}
    a = ask(question)["assurance"]
    assert a["ceiling"] == pytest.approx(stats.norm.cdf(1.0), rel=1e-9)
    assert a["target_per_group"] is None


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"assurance": {"sd": 0.2}}, "assurance.mean"),
        (
            {
                "hypothesis": {"aim": "noninferiority", "margin": -0.2},
                "assurance": {"mean": 0.0, "sd": 0.1},
                "effect": {"difference": 0.0},
            },
            "assurance",
        ),
        ({"assurance": {"mean": 0.5, "sd": 0.2, "lower": 1.0, "upper": 0.5}}, "assurance.upper"),
    ],
)
def test_bad_assurance_names_the_field(change, field):
    question = {**z_question(64, {"mean": 0.5, "sd": 0.2}), **change}
    with pytest.raises(QuestionError) as info:
        ask(question)
    assert info.value.field == field
