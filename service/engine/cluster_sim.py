"""Simulated cluster-randomized trials: cluster random effects, analyzed by the cluster-level test.

A chunk task whose ``settings`` hold ``cluster`` ({"mean_size": analyzed m, "cv", "icc"}) has
``per_group`` in clusters. Per group ``a`` the generators of (group a, variate v, block 0) draw,
row by row over the group's clusters:

* variate 0: cluster sizes, gamma with mean m and coefficient of variation cv, rounded to a
  whole number ≥ 1 (cv = 0: every cluster has round(m), at least 1);
* normal outcome (variates 1, 2): cluster effect N(0, ICC·σ²) plus the mean of the cluster's
  individual errors, N(0, (1 − ICC)·σ²/m_j), drawn as the cluster mean directly (it is all the
  cluster-level test uses);
* binary outcome (variates 1, 2): beta-binomial, cluster probability Beta(p(1 − ρ)/ρ,
  (1 − p)(1 − ρ)/ρ) (intra-cluster correlation ρ = ICC; ρ = 0: p itself), then Binomial(m_j, p_j).

The test: arm means weighted by cluster size (each person counts once), their difference over the
pooled between-cluster standard error, t with k₁ + k₂ − 2 df; with equal sizes this is the
two-sample t test on cluster means (Donner & Klar 2000).
"""

from __future__ import annotations

import numpy as np

from . import vectests


def sizes(gen: np.random.Generator, m: float, cv: float, shape: tuple[int, int]) -> np.ndarray:
    """Return cluster sizes with mean m and coefficient of variation cv (gamma, rounded, ≥ 1)."""
    if cv <= 0:
        return np.full(shape, max(1.0, float(np.round(m))))
    k = 1.0 / (cv * cv)
    out = np.round(gen.standard_gamma(k, shape) * (m / k))
    np.maximum(out, 1.0, out=out)
    return out


def _arm(streams, index: int, arm: dict, k: int, cl: dict, rows: int):
    """Return (cluster summaries, sizes) of one arm, shape (rows, k) each."""
    m = sizes(streams.gen(index, 0), cl["mean_size"], cl["cv"], (rows, k))
    icc = cl["icc"]
    if arm["family"] == "bernoulli":
        p = arm["p"]
        if icc > 0 and 0 < p < 1:
            scale = (1.0 - icc) / icc
            pj = streams.gen(index, 1).beta(p * scale, (1.0 - p) * scale, (rows, k))
        else:
            pj = np.full((rows, k), p)
        y = streams.gen(index, 2).binomial(m.astype(np.int64), pj)
        return y / m, m
    sd = arm["sd"]
    u = streams.gen(index, 1).standard_normal((rows, k)) * (sd * np.sqrt(icc))
    e = streams.gen(index, 2).standard_normal((rows, k)) * (sd * np.sqrt((1.0 - icc) / m))
    return arm["mean"] + arm.get("shift", 0.0) + u + e, m


def cluster_t(y1, m1, y2, m2):
    """Return (estimate, standard error, df) of the size-weighted cluster-level t test."""
    k1, k2 = y1.shape[1], y2.shape[1]
    resid = []
    means = []
    for y, m in ((y1, m1), (y2, m2)):
        total = m.sum(axis=1, keepdims=True)
        mean = (m * y).sum(axis=1, keepdims=True) / total
        # Deviations scaled by size relative to the arm's mean size: the ratio-estimator form
        # whose squares estimate k·Var(weighted mean); equal sizes give plain deviations.
        resid.append((m / (total / y.shape[1])) * (y - mean))
        means.append(mean[:, 0])
    df = k1 + k2 - 2
    ss = (resid[0] ** 2).sum(axis=1) + (resid[1] ** 2).sum(axis=1)
    se = np.sqrt(ss / df * (1.0 / k1 + 1.0 / k2))
    return means[1] - means[0], se, df


def reject(streams, task, rows: int) -> tuple[np.ndarray, dict]:
    """Return the reject decisions of ``rows`` simulated cluster trials (a ChunkTask)."""
    cl = task.settings["cluster"]
    (a1, a2), (k1, k2) = task.models, task.per_group
    y1, m1 = _arm(streams, 0, a1, k1, cl, rows)
    y2, m2 = _arm(streams, 1, a2, k2, cl, rows)
    est, se, df = cluster_t(y1, m1, y2, m2)
    return vectests.decide(est, se, df, task.alpha, task.rule), {}
