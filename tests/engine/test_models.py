"""Data models: validation names the field, moments and draws agree with scipy.stats."""

import math

import numpy as np
import pytest
from scipy import stats

from service.engine import models
from service.engine.errors import QuestionError

# Each family with a parameter set and the scipy.stats distribution it must equal.
CASES = [
    ({"family": "normal", "mean": 1.5, "sd": 2.0}, stats.norm(1.5, 2.0)),
    ({"family": "lognormal", "mu": 0.2, "sigma": 0.6}, stats.lognorm(s=0.6, scale=math.exp(0.2))),
    ({"family": "gamma", "shape": 2.5, "scale": 1.5}, stats.gamma(2.5, scale=1.5)),
    ({"family": "student_t", "df": 5.0, "loc": 1.0, "scale": 2.0}, stats.t(5.0, 1.0, 2.0)),
    ({"family": "uniform", "low": -1.0, "high": 3.0}, stats.uniform(-1.0, 4.0)),
    ({"family": "exponential", "scale": 2.0}, stats.expon(scale=2.0)),
    ({"family": "weibull", "shape": 1.7, "scale": 3.0}, stats.weibull_min(1.7, scale=3.0)),
    ({"family": "bernoulli", "p": 0.3}, stats.bernoulli(0.3)),
    ({"family": "poisson", "mean": 4.0}, stats.poisson(4.0)),
    ({"family": "negative_binomial", "mean": 4.0, "dispersion": 2.0}, stats.nbinom(2.0, 2.0 / 6.0)),
]
CONTINUOUS = [
    c for c in CASES if c[0]["family"] not in ("bernoulli", "poisson", "negative_binomial")
]


def _gens(seed, k=2):
    return [
        np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(v,))))
        for v in range(k)
    ]


@pytest.mark.parametrize("arm,dist", CASES, ids=[c[0]["family"] for c in CASES])
def test_moments_match_scipy(arm, dist):
    # recomputed: scipy.stats frozen distribution mean() and var()
    mean, var = models.moments(models.check_arm(arm, "arm"))
    assert mean == pytest.approx(dist.mean(), rel=1e-12)
    assert var == pytest.approx(dist.var(), rel=1e-12)


def test_contaminated_normal_moments():
    # formula: mixture variance sd²·((1 − c) + c·k²), mean unchanged
    arm = {
        "family": "contaminated_normal",
        "mean": 1.0,
        "sd": 2.0,
        "contamination": 0.1,
        "sd_factor": 3.0,
    }
    assert models.moments(arm) == pytest.approx((1.0, 4.0 * (0.9 + 0.1 * 9.0)))


def test_heavy_tails_have_no_moments():
    # formula: the Cauchy has no mean; Student t with df ≤ 2 has no variance
    assert models.moments({"family": "cauchy", "loc": 0.0, "scale": 1.0}) == (None, None)
    assert models.moments({"family": "student_t", "df": 2.0, "loc": 1.0, "scale": 1.0}) == (
        1.0,
        None,
    )
    assert models.center({"family": "cauchy", "loc": 2.5, "scale": 1.0}) == 2.5


@pytest.mark.parametrize("arm,dist", CONTINUOUS, ids=[c[0]["family"] for c in CONTINUOUS])
def test_draws_follow_the_distribution(arm, dist):
    # recomputed: Kolmogorov–Smirnov against scipy.stats at a fixed seed (a 1-in-1000 alarm)
    x = models.sample(arm, _gens(11), (4000,))
    assert stats.kstest(x, dist.cdf).pvalue > 1e-3


@pytest.mark.parametrize(
    "arm,dist",
    [c for c in CASES if c not in CONTINUOUS],
    ids=["bernoulli", "poisson", "negative_binomial"],
)
def test_discrete_draws_follow_the_distribution(arm, dist):
    # recomputed: chi-square goodness of fit against the scipy.stats pmf (cells with ≥ 5 expected)
    x = models.sample(arm, _gens(12), (6000,)).astype(int)
    top = int(dist.ppf(0.995))
    observed = np.bincount(np.minimum(x, top), minlength=top + 1)
    expected = np.append(dist.pmf(np.arange(top)), dist.sf(top - 1)) * x.size
    assert stats.chisquare(observed, expected).pvalue > 1e-3


def test_contaminated_normal_draws():
    # formula: the mixture CDF (1 − c)·Φ((x − μ)/σ) + c·Φ((x − μ)/(kσ)); KS at a fixed seed
    arm = {
        "family": "contaminated_normal",
        "mean": 0.0,
        "sd": 1.0,
        "contamination": 0.2,
        "sd_factor": 4.0,
    }
    x = models.sample(arm, _gens(13), (4000,))

    def cdf(v):
        return 0.8 * stats.norm.cdf(v) + 0.2 * stats.norm.cdf(v / 4.0)

    assert stats.kstest(x, cdf).pvalue > 1e-3


@pytest.mark.parametrize(
    "arm",
    [c[0] for c in CASES]
    + [
        {"family": "cauchy", "loc": 0.0, "scale": 1.0},
        {
            "family": "contaminated_normal",
            "mean": 0.0,
            "sd": 1.0,
            "contamination": 0.2,
            "sd_factor": 4.0,
        },
    ],
    ids=lambda a: a["family"],
)
def test_row_sub_batches_give_the_same_numbers(arm):
    # common practice, no source: a generator consumed row by row is independent of batch sizes
    whole = models.sample(arm, _gens(5), (10, 32))
    g = _gens(5)
    parts = np.concatenate([models.sample(arm, g, (3, 32)), models.sample(arm, g, (7, 32))])
    assert np.array_equal(whole, parts)


def test_shift_moves_draws_and_mean():
    # formula: X + c has mean E[X] + c and the same variance
    arm = models.shifted({"family": "gamma", "shape": 2.0, "scale": 1.0}, 0.5)
    assert models.moments(arm) == pytest.approx((2.5, 2.0))
    base = models.sample({"family": "gamma", "shape": 2.0, "scale": 1.0}, _gens(3), (50,))
    assert np.allclose(models.sample(arm, _gens(3), (50,)), base + 0.5)


@pytest.mark.parametrize(
    "arm,field,needle",
    [
        ({"family": "normal", "mean": 0.0, "sd": -1.0}, "data.control.sd", "must be > 0; got -1"),
        ({"family": "normal", "mean": 0.0}, "data.control.sd", "is required"),
        (
            {"family": "normal", "mean": 0.0, "sd": 1.0, "scale": 2.0},
            "data.control.scale",
            "normal takes mean, sd",
        ),
        ({"family": "banana"}, "data.control.family", "allowed: normal"),
        ({"family": "bernoulli", "p": 1.5}, "data.control.p", "must be in [0, 1]; got 1.5"),
        ({"family": "uniform", "low": 2.0, "high": 1.0}, "data.control.high", "greater than low"),
        (
            {"family": "normal", "mean": "big", "sd": 1.0},
            "data.control.mean",
            "must be a number; got 'big'",
        ),
        ({"family": "normal", "mean": float("nan"), "sd": 1.0}, "data.control.mean", "finite"),
    ],
)
def test_bad_arms_name_the_field_and_value(arm, field, needle):
    # common practice, no source: errors name the field, the value and what is allowed
    with pytest.raises(QuestionError) as info:
        models.check_arm(arm, "data.control")
    assert info.value.field == field
    assert needle in info.value.message
