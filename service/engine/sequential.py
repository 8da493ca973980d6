"""Group-sequential boundaries by alpha (and beta) spending, computed by numerical integration.

The standardized statistic at look k is Z_k = S_k/√t_k, where the score S has independent
normal increments: S_k − S_{k−1} ~ N(δ·Δt, Δt), t the information fraction and δ the drift
(the expected Z at full information). The sub-density of S on the continuation region is
carried from look to look on a Simpson grid (Armitage, McPherson & Rowe 1969; Jennison &
Turnbull 2000, ch. 19), so a crossing probability is one vectorized sum and a boundary one root.

Efficacy boundaries spend alpha by a Lan & DeMets (1983) spending function: the O'Brien–Fleming
type 2 − 2Φ(z_{1−α/2}/√t), the Pocock type α·ln(1 + (e − 1)t), or the Hwang, Shih & DeCani
(1990) family α(1 − e^{−γt})/(1 − e^{−γ}). Two-sided designs are symmetric (|Z| ≥ c). Futility
boundaries (one-sided only) spend beta under the alternative and are non-binding: the efficacy
boundaries are computed as if futility never stopped the trial, so alpha holds either way.
Pure: numpy and scipy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize
from scipy.special import ndtr, ndtri

FAMILIES = ("obrien_fleming", "pocock", "hwang_shih_decani")
POINTS = 201  # Simpson grid points per look: integration error far below 1e-6 in probability
_TAIL = 8.5  # the grid reaches this many SDs past the mean where a region is unbounded
_FAR = 12.0  # a boundary that spends nothing sits here (z scale)
_SQRT2PI = math.sqrt(2 * math.pi)


def spent(family: str, t: np.ndarray | float, level: float, gamma: float = -4.0) -> np.ndarray:
    """Cumulative error spent at information fractions ``t`` by a spending function of ``level``."""
    t = np.clip(np.asarray(t, dtype=float), 0.0, 1.0)
    if family == "obrien_fleming":
        with np.errstate(divide="ignore"):
            out = 2.0 - 2.0 * ndtr(ndtri(1.0 - level / 2.0) / np.sqrt(t))
        return np.where(t > 0, out, 0.0)
    if family == "pocock":
        return level * np.log1p((math.e - 1.0) * t)
    if family == "hwang_shih_decani":
        if abs(gamma) < 1e-9:
            return level * t
        return level * (-np.expm1(-gamma * t)) / (-math.expm1(-gamma))
    raise ValueError(f"unknown spending family {family!r}; the families are {', '.join(FAMILIES)}")


def alpha_spent(plan_family: str, t, alpha: float, sides: int, gamma: float) -> np.ndarray:
    """Cumulative alpha spent; two-sided designs spend alpha/2 on each side (the usual tables)."""
    return sides * spent(plan_family, t, alpha / sides, gamma)


def _simpson(lo: float, hi: float, m: int = POINTS) -> tuple[np.ndarray, np.ndarray]:
    s = np.linspace(lo, hi, m)
    w = np.ones(m)
    w[1:-1:2], w[2:-1:2] = 4.0, 2.0
    return s, w * (hi - lo) / (3.0 * (m - 1))


class _Walk:
    """The sub-density of S on the continuation region, look by look, under drift δ."""

    def __init__(self, t: np.ndarray, drift: float):
        self.t, self.drift = t, drift
        self.s = np.zeros(1)  # before the first look: S = 0 with probability 1
        self.mass = np.ones(1)
        self.k = 0  # looks already passed

    def _step(self) -> tuple[float, float, float]:
        t_prev = self.t[self.k - 1] if self.k else 0.0
        dt = self.t[self.k] - t_prev
        return dt, math.sqrt(dt), math.sqrt(self.t[self.k])

    def above(self, z: float) -> float:
        """P(continue so far and Z at the next look ≥ z)."""
        dt, sd, root = self._step()
        return float(self.mass @ ndtr((self.s + self.drift * dt - z * root) / sd))

    def below(self, z: float) -> float:
        """P(continue so far and Z at the next look ≤ z)."""
        dt, sd, root = self._step()
        return float(self.mass @ ndtr((z * root - self.s - self.drift * dt) / sd))

    def advance(self, lower: float, upper: float) -> None:
        """Move past the next look, continuing while lower < Z < upper (±inf allowed)."""
        dt, sd, root = self._step()
        centre = self.drift * self.t[self.k]
        reach = _TAIL * root
        lo = lower * root if math.isfinite(lower) else centre - reach
        hi = upper * root if math.isfinite(upper) else centre + reach
        lo, hi = max(lo, centre - reach), min(hi, centre + reach)  # the marginal's tails
        if hi <= lo:
            self.s, self.mass = np.zeros(1), np.zeros(1)
        else:
            s, w = _simpson(lo, hi)
            x = (s[:, None] - self.s[None, :] - self.drift * dt) / sd
            density = np.exp(-0.5 * x * x) @ self.mass / (sd * _SQRT2PI)
            self.s, self.mass = s, w * density
        self.k += 1


def _root(f, lo: float = -6.0, hi: float = _FAR) -> float:
    """The z where a decreasing crossing probability f(z) − target changes sign."""
    if f(hi) >= 0:
        return hi
    if f(lo) <= 0:
        return lo
    return float(optimize.brentq(f, lo, hi, xtol=1e-10))


def efficacy_bounds(t: np.ndarray, alpha: float, sides: int, family: str, gamma: float) -> list:
    """Efficacy boundaries on the z scale (two-sided: the upper one of ±c), spending alpha."""
    cumulative = alpha_spent(family, t, alpha, sides, gamma)
    walk, bounds, used = _Walk(t, 0.0), [], 0.0
    for k in range(len(t)):
        target = cumulative[k] - used
        if sides == 2:
            c = _root(lambda z, g=target: walk.above(z) + walk.below(-z) - g, 0.0)
            used += walk.above(c) + walk.below(-c)
            walk.advance(-c, c)
        else:
            c = _root(lambda z, g=target: walk.above(z) - g)
            used += walk.above(c)
            walk.advance(-math.inf, c)
        bounds.append(c)
    return bounds


def futility_bounds(
    t: np.ndarray, upper: list, drift: float, beta: float, family: str, gamma: float
) -> tuple[list, float]:
    """Futility boundaries spending ``beta`` under ``drift`` (one-sided); the last equals the
    last efficacy boundary. Returns them and the type II error they give."""
    cumulative = spent(family, t, beta, gamma)
    walk, lower, used = _Walk(t, drift), [], 0.0
    for k in range(len(t)):
        if k == len(t) - 1:
            a = upper[k]
        else:
            target = cumulative[k] - used
            a = -_root(lambda z, g=target: walk.below(-z) - g)  # below(a) rises with a
            a = min(a, upper[k])
        used += walk.below(a)
        walk.advance(a, upper[k])
        lower.append(a)
    return lower, used


def crossings(t: np.ndarray, lower: list, upper: list, drift: float, sides: int) -> dict:
    """Per look: P(stop for efficacy), P(stop for futility) under ``drift``.

    Two-sided: efficacy counts the side the drift points to (power), ``other`` the opposite side.
    """
    walk = _Walk(t, drift)
    eff, fut, other = [], [], []
    sign = -1.0 if drift < 0 else 1.0
    for k in range(len(t)):
        if sides == 2:
            c = upper[k]
            up, down = walk.above(c), walk.below(-c)
            eff.append(up if sign > 0 else down)
            other.append(down if sign > 0 else up)
            fut.append(0.0)
            walk.advance(-c, c)
        else:
            eff.append(walk.above(upper[k]))
            a = lower[k] if lower is not None else -math.inf
            fut.append(walk.below(a) if math.isfinite(a) else 0.0)
            other.append(0.0)
            walk.advance(a, upper[k])
    return {"efficacy": eff, "futility": fut, "other": other}


@dataclass(frozen=True)
class Plan:
    """The interim plan of a question (the ``interim`` block, normalized)."""

    fractions: tuple[float, ...]
    efficacy: str
    efficacy_gamma: float
    futility: str | None
    futility_gamma: float

    @classmethod
    def of(cls, block: dict) -> Plan:
        looks = int(block["looks"])
        given = block.get("information_fractions")
        fractions = tuple(float(x) for x in given) if given else equal(looks)
        futility = block.get("futility_spending") or "none"
        return cls(
            fractions=fractions,
            efficacy=block.get("efficacy_spending") or "obrien_fleming",
            efficacy_gamma=float(block.get("efficacy_gamma", -4.0) or -4.0),
            futility=None if futility == "none" else futility,
            futility_gamma=float(block.get("futility_gamma", -2.0) or -2.0),
        )

    @property
    def t(self) -> np.ndarray:
        return np.asarray(self.fractions, dtype=float)


def equal(looks: int) -> tuple[float, ...]:
    """Equally spaced information fractions k/K."""
    return tuple((k + 1) / looks for k in range(looks))


def fixed_drift(alpha: float, sides: int, power: float) -> float:
    """The drift a single analysis needs: z_{1−α/sides} + z_{power}."""
    return float(ndtri(1.0 - alpha / sides) + ndtri(power))


def solve(plan: Plan, alpha: float, sides: int, power: float) -> dict:
    """The drift at full information that reaches ``power``, and its inflation factor."""
    t = plan.t
    upper = efficacy_bounds(t, alpha, sides, plan.efficacy, plan.efficacy_gamma)
    beta = 1.0 - power
    lo, hi = 0.0, 2.0 * fixed_drift(alpha, sides, power) + 4.0
    if plan.futility and sides == 1:

        def gap(d: float) -> float:
            return futility_bounds(t, upper, d, beta, plan.futility, plan.futility_gamma)[1] - beta

    else:

        def gap(d: float) -> float:
            return beta - (1.0 - sum(crossings(t, None, upper, d, sides)["efficacy"]))

    drift = float(optimize.brentq(gap, 1e-6, hi, xtol=1e-10)) if lo < hi else 0.0
    return {
        "drift": drift,
        "inflation": (drift / fixed_drift(alpha, sides, power)) ** 2,
        "upper": upper,
    }


def evaluate(
    plan: Plan,
    alpha: float,
    sides: int,
    drift: float,
    beta: float | None,
    design_drift: float | None = None,
) -> dict:
    """Boundaries and operating characteristics at ``drift`` (full-information expected Z).

    ``beta``: the type II error the futility boundaries spend under ``design_drift`` (default:
    ``drift``); None solves it so that the spending is self-consistent at ``drift`` (a power
    question: the futility boundaries then spend exactly the type II error they produce).
    """
    t = plan.t
    upper = efficacy_bounds(t, alpha, sides, plan.efficacy, plan.efficacy_gamma)
    lower = None
    if plan.futility and sides == 1:
        if beta is None:

            def gap(b: float) -> float:
                return (
                    futility_bounds(t, upper, drift, b, plan.futility, plan.futility_gamma)[1] - b
                )

            beta = float(optimize.brentq(gap, 1e-9, 1.0 - 1e-9, xtol=1e-10))
        at = drift if design_drift is None else design_drift
        lower, _ = futility_bounds(t, upper, at, beta, plan.futility, plan.futility_gamma)
    null = crossings(t, lower, upper, 0.0, sides)
    alt = crossings(t, lower, upper, drift, sides)
    return {
        "t": t,
        "upper": upper,
        "lower": lower,
        "alpha_spent": alpha_spent(plan.efficacy, t, alpha, sides, plan.efficacy_gamma),
        "null": null,
        "alternative": alt,
        "power": float(sum(alt["efficacy"])),
        "expected_fraction_null": expected_fraction(t, null),
        "expected_fraction_alternative": expected_fraction(t, alt),
    }


def expected_fraction(t: np.ndarray, probs: dict) -> float:
    """E[information at stopping] / maximum information (the last look takes the rest)."""
    stop = np.add(np.add(probs["efficacy"], probs["futility"]), probs["other"])
    stop[-1] = 1.0 - stop[:-1].sum()
    return float(np.dot(t, stop))


def classical_constant(looks: int, alpha: float, shape: str) -> float:
    """The classical two-sided constant C: Pocock |Z_k| ≥ C, O'Brien–Fleming |Z_k| ≥ C·√(K/k)."""
    t = np.asarray(equal(looks))
    scale = np.ones(looks) if shape == "pocock" else np.sqrt(1.0 / t)

    def size(c: float) -> float:
        walk, total = _Walk(t, 0.0), 0.0
        for k in range(looks):
            z = c * scale[k]
            total += walk.above(z) + walk.below(-z)
            walk.advance(-z, z)
        return total - alpha

    return float(optimize.brentq(size, 1.0, 6.0, xtol=1e-10))
