"""Faster kernels and special functions give exactly the digits of the slower paths they replace.

References: scipy.stats (binom.ppf, t.ppf, nct.sf, norm.cdf, norm.ppf) evaluated directly, and
the textbook log-rank sums written out plainly here; equality is exact, not approximate.
"""

import math

import numpy as np
import pytest
from scipy import stats

from service.engine import quantiles, vectests
from service.engine.chunks import Streams, run_chunk
from service.engine.plan import make_plan
from service.engine.runner import make_task
from tests.engine.questions import make_q


@pytest.mark.parametrize("n", [1, 2, 7, 30, 64, 300, 2500])
@pytest.mark.parametrize("p", [1e-4, 0.05, 0.3, 0.5, 0.9, 0.999, 0.0, 1.0])
def test_binomial_quantile_is_scipy_binom_ppf(n, p):
    # exact: scipy.stats.binom.ppf on the same uniforms, including the extreme ones
    rng = np.random.default_rng(n)
    u = 1.0 - rng.random(20000)  # (0, 1], as the simulator draws them
    u = np.concatenate([u, [1.0, 1 - 2**-53, 1 - 1e-12, 2**-53, 1e-300, 1e-12, 0.5]])
    with np.errstate(all="ignore"):
        expected = stats.binom.ppf(u, n, p)
    got = vectests.binomial_quantile(u, n, p)
    assert got.dtype == np.float64 and np.array_equal(got, expected)


def test_two_proportion_chunk_matches_scipy_quantiles():
    # exact: the chunk's rejections recomputed from the same uniforms with scipy.stats.binom.ppf
    q = make_q(
        "binary", "two_groups", per_group=(120, 120), simulation={"seed": 5, "replicates": 3000}
    )
    p = make_plan(q, 0.05)
    task = make_task(p, [120, 120], stream=0, chunk=0, chunk_size=3000, replicates=3000, seed=5)
    got = run_chunk(dict(task))["rejections"]
    streams = Streams(5, 0, 0)
    counts = []
    for i, model in enumerate(task["models"]):
        u = 1.0 - streams.gen(i, 0).random(3000)
        counts.append(stats.binom.ppf(u, 120, model["p"]))
    est, se = vectests.two_proportion_z(counts[0], 120, counts[1], 120, pooled=True)
    assert got == int(np.count_nonzero(vectests.decide(est, se, None, 0.05, task["rule"])))


def _shuffled(a: np.ndarray, rng) -> np.ndarray:
    return np.take_along_axis(
        a, rng.permuted(np.tile(np.arange(a.shape[1]), (len(a), 1)), axis=1), 1
    )


def test_rank_statistics_do_not_depend_on_the_order_of_ties():
    # exact: tied values share an averaged rank, so any sort (stable or not) gives these digits
    rng = np.random.default_rng(3)
    x = rng.integers(0, 4, (400, 25)).astype(float)
    y = rng.integers(0, 4, (400, 31)).astype(float)
    z = rng.integers(0, 4, (400, 12)).astype(float)
    d = rng.integers(-3, 4, (400, 30)).astype(float)
    for _ in range(3):
        assert np.array_equal(
            vectests.rank_sum_z(_shuffled(x, rng), _shuffled(y, rng)), vectests.rank_sum_z(x, y)
        )
        assert np.array_equal(
            vectests.signed_rank_z(_shuffled(d, rng)), vectests.signed_rank_z(d), equal_nan=True
        )
        assert np.array_equal(
            vectests.kruskal_h([_shuffled(x, rng), y, _shuffled(z, rng)]),
            vectests.kruskal_h([x, y, z]),
        )


def test_logrank_matches_the_plain_sums():
    # exact: (observed − expected)/√variance with 64-bit counts, written out step by step
    rng = np.random.default_rng(4)
    time = rng.exponential(1.0, (300, 90))
    event = rng.random((300, 90)) < 0.7
    order = np.argsort(time, axis=1)
    treated = order >= 40
    died = np.take_along_axis(event, order, axis=1)
    at_risk = np.arange(90, 0, -1, dtype=np.float64)
    t_risk = treated.sum(axis=1, keepdims=True) - np.cumsum(treated, axis=1) + treated
    share = t_risk / at_risk
    observed = (died & treated).sum(axis=1)
    expected = np.where(died, share, 0.0).sum(axis=1)
    variance = np.where(died, share * (1.0 - share), 0.0).sum(axis=1)
    plain = (observed - expected) / np.sqrt(variance)
    assert np.array_equal(vectests.logrank_z(time, event, 40), plain)


def test_t_power_pieces_are_scipy_digit_for_digit():
    # exact: scipy.stats.t.ppf, nct.sf, norm.cdf and norm.ppf at the same arguments
    rng = np.random.default_rng(6)
    for _ in range(500):
        df = float(rng.choice([rng.uniform(0.5, 3), rng.uniform(3, 60), rng.uniform(60, 5000)]))
        nc = float(rng.normal(0, 8))
        q = float(rng.uniform(0.5, 0.99999))
        x = float(stats.t.ppf(q, df))
        assert quantiles._t_ppf(q, df) == x
        ref = float(stats.nct.sf(x, df, nc))
        got = quantiles._nct_sf(x, df, nc)
        assert got == ref or (math.isnan(got) and math.isnan(ref))
        assert quantiles.z(q) == float(stats.norm.ppf(q))
        shift = float(rng.normal(0, 4))
        two = float(stats.norm.cdf(shift - 1.96) + stats.norm.cdf(-shift - 1.96))
        assert quantiles.normal_power(shift, 1.96, 2) == pytest.approx(two, rel=0, abs=0)
