"""Repeated measures of a continuous outcome at v equally spaced visits (times 0, 1, …, v − 1):
the covariance (compound symmetry or AR(1)), monotone dropout by a per-visit retention, and the
generalized least squares (GLS) estimate of a group's mean or slope with the covariance known.

A subject seen at the first K visits contributes X_K'R_K⁻¹y (R_K the correlation of those
visits, X_K the design: a column of ones for the mean, ones and times for the line); the group's
estimate is M⁻¹·Σ contributions with M = Σ X_K'R_K⁻¹X_K, and its variance σ²M⁻¹ (Diggle,
Heagerty, Liang & Zeger 2002, §4.3, §8.1). With complete data and compound symmetry this is
σ²(1 + (v − 1)ρ)/v for the mean and σ²(1 − ρ)/Σ(tⱼ − t̄)² for the slope (§2.4).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

STRUCTURES = ("compound_symmetry", "ar1")
TARGETS = ("mean_over_visits", "slope")


@lru_cache(maxsize=64)
def correlation(structure: str, rho: float, visits: int) -> np.ndarray:
    """The v × v correlation matrix."""
    lag = np.abs(np.subtract.outer(np.arange(visits), np.arange(visits)))
    if structure == "ar1":
        return rho**lag
    return np.where(lag == 0, 1.0, rho)


def design_matrix(target: str, visits: int) -> np.ndarray:
    t = np.arange(visits, dtype=float)
    if target == "slope":
        return np.column_stack([np.ones(visits), t])
    return np.ones((visits, 1))


def pattern_probabilities(retention: float, visits: int) -> np.ndarray:
    """P(a subject is seen at exactly the first K visits), K = 1…v: stays from one visit to the
    next with probability ``retention`` (monotone dropout)."""
    seen = retention ** np.arange(visits, dtype=float)  # P(seen at visit j)
    return seen - np.append(seen[1:], 0.0)


@lru_cache(maxsize=64)
def pattern_weights(structure: str, rho: float, visits: int, target: str):
    """Per K = 1…v: W_K (v × p, rows beyond K zero) with contribution W_K'y, and M_K = X_K'R_K⁻¹X_K."""
    r = correlation(structure, rho, visits)
    x = design_matrix(target, visits)
    weights, infos = [], []
    for k in range(1, visits + 1):
        w = np.zeros_like(x)
        w[:k] = np.linalg.solve(r[:k, :k], x[:k])
        weights.append(w)
        infos.append(x[:k].T @ w[:k])
    return np.array(weights), np.array(infos)


def unit_variance(structure: str, rho: float, visits: int, target: str, retention: float) -> float:
    """The variance (over σ²) of one group's estimate per subject: [(Σ_K π_K M_K)⁻¹] of the
    target coefficient, the expected information of a subject."""
    _, infos = pattern_weights(structure, float(rho), int(visits), target)
    probs = pattern_probabilities(retention, visits)
    info = np.einsum("k,kij->ij", probs, infos)
    if target == "slope" and np.linalg.det(info) <= 1e-12:
        raise ValueError("the slope is not estimable: too few subjects reach a second visit")
    return float(np.linalg.inv(info)[-1, -1])
