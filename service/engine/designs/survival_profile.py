"""Time-to-event timelines beyond the exponential closed form, by numerical integration.

A *profile* holds piecewise-constant control hazards (cut points in the time unit), a hazard
ratio that may start only after a lag (a delayed treatment effect: HR 1 before it), a constant
loss hazard per group and accrual at piecewise-constant relative rates over equal parts of the
accrual period. From it: P(event) per group at the analysis (a + f), the expected events by any
calendar time (for the time the required events are reached) and the log-rank drift of Lakatos
(1988) in continuous time (his Markov steps made infinitely small):

    E[U]/N = ∫ (w_t λ_t R_t − π(u)·d(u)) du,   V/N = ∫ π(u)(1 − π(u))·d(u) du,

with R_g(u) the probability a group-g subject is still at risk at follow-up time u, w_g the
allocation shares, π = w_t R_t / (w_c R_c + w_t R_t) the treatment share at risk and d(u) the
event density. E[Z] ≈ √N · (E[U]/N) / √(V/N). Integrals are Gauss–Legendre on the pieces between
every kink (cut points, the lag, accrual boundaries), so they are exact to rounding for these
piecewise-smooth integrands. numpy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(48)


@dataclass(frozen=True)
class Profile:
    cut_points: tuple[float, ...]  # where the control hazard changes, increasing, > 0
    control_hazards: tuple[float, ...]  # one per piece: len(cut_points) + 1
    hazard_ratio: float
    lag: float  # HR 1 before it
    loss: tuple[float, float]  # control, treatment loss hazards
    accrual: float
    follow_up: float
    accrual_rates: tuple[float, ...]  # relative rates over equal parts of the accrual period

    @property
    def horizon(self) -> float:
        return self.accrual + self.follow_up


def pieces(p: Profile, group: int, hr: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Return (starts, hazards) of group 0 (control) or 1 (treatment); starts[0] = 0."""
    hr = p.hazard_ratio if hr is None else hr
    starts = sorted({0.0, *p.cut_points, *((p.lag,) if p.lag > 0 and group == 1 else ())})
    starts_a = np.array(starts)
    base = np.array(p.control_hazards)[np.searchsorted(p.cut_points, starts_a, side="right")]
    if group == 1:
        base = base * np.where(starts_a >= p.lag, hr, 1.0)
    return starts_a, base


def _cumulative(starts: np.ndarray, rates: np.ndarray) -> np.ndarray:
    """Cumulative hazard at each piece start."""
    return np.concatenate(([0.0], np.cumsum(np.diff(starts) * rates[:-1])))


def event_cdf(s: np.ndarray, starts: np.ndarray, rates: np.ndarray, loss: float) -> np.ndarray:
    """P(event observed by follow-up time s) with the loss hazard as a competing risk."""
    s = np.asarray(s, dtype=float)
    theta = rates + loss
    surv_at = np.exp(-(_cumulative(starts, rates) + loss * starts))  # all-cause survival
    ends = np.append(starts[1:], np.inf)
    # Complete pieces before s, then the partial piece holding s.
    full = rates / theta * surv_at * -np.expm1(-theta * (ends - starts))
    total = np.concatenate(([0.0], np.cumsum(full[:-1])))
    j = np.searchsorted(starts, s, side="right") - 1
    j = np.clip(j, 0, len(starts) - 1)
    part = rates[j] / theta[j] * surv_at[j] * -np.expm1(-theta[j] * (s - starts[j]))
    return np.where(s > 0, total[j] + part, 0.0)


def at_risk(u: np.ndarray, starts: np.ndarray, rates: np.ndarray, loss: float) -> np.ndarray:
    """P(no event and not lost by follow-up time u)."""
    j = np.clip(np.searchsorted(starts, u, side="right") - 1, 0, len(starts) - 1)
    cum = _cumulative(starts, rates)[j] + rates[j] * (u - starts[j])
    return np.exp(-cum - loss * u)


def _accrual_edges(p: Profile) -> np.ndarray:
    return np.linspace(0.0, p.accrual, len(p.accrual_rates) + 1)


def _density(p: Profile) -> np.ndarray:
    """Entry density per accrual part (integrates to 1 over [0, a])."""
    rates = np.array(p.accrual_rates, dtype=float)
    width = p.accrual / len(rates)
    return rates / (rates.sum() * width)


def enrolled_share(p: Profile, t: np.ndarray) -> np.ndarray:
    """Fraction of subjects enrolled by calendar time t (1 when there is no accrual period)."""
    t = np.asarray(t, dtype=float)
    if p.accrual == 0:
        return np.where(t >= 0, 1.0, 0.0)
    edges, dens = _accrual_edges(p), _density(p)
    cum = np.concatenate(([0.0], np.cumsum(dens * np.diff(edges))))
    k = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, len(dens) - 1)
    return np.clip(cum[k] + dens[k] * (t - edges[k]), 0.0, 1.0)


def _quad(f, knots: list[float]) -> float:
    """∫ f over [knots[0], knots[-1]] by Gauss–Legendre on each interval between sorted knots."""
    pts = np.unique(np.array(knots, dtype=float))
    total = 0.0
    for lo, hi in zip(pts[:-1], pts[1:], strict=True):
        if hi - lo <= 0:
            continue
        x = 0.5 * (hi - lo) * _NODES + 0.5 * (hi + lo)
        total += 0.5 * (hi - lo) * float(np.dot(_WEIGHTS, f(x)))
    return total


def events_by(p: Profile, group: int, t: float, hr: float | None = None) -> float:
    """Expected events per enrolled subject of a group by calendar time t (entries up to t)."""
    starts, rates = pieces(p, group, hr)
    loss = p.loss[group]
    if p.accrual == 0:
        return float(event_cdf(np.array([t]), starts, rates, loss)[0])
    top = min(t, p.accrual)
    if top <= 0:
        return 0.0
    edges, dens = _accrual_edges(p), _density(p)

    def f(e: np.ndarray) -> np.ndarray:
        k = np.clip(np.searchsorted(edges, e, side="right") - 1, 0, len(dens) - 1)
        return dens[k] * event_cdf(t - e, starts, rates, loss)

    knots = [0.0, top, *[x for x in edges if x < top], *[t - s for s in starts if 0 < t - s < top]]
    return _quad(f, knots)


def p_event(p: Profile, group: int, hr: float | None = None) -> float:
    """P(event observed by the end of follow-up, a + f)."""
    return events_by(p, group, p.horizon, hr)


def calendar_time(p: Profile, per_group: list[float], events: float) -> float | None:
    """The calendar time at which the expected events reach ``events``; None when never."""
    n_c, n_t = float(per_group[0]), float(per_group[1])

    def expected(t: float) -> float:
        return n_c * events_by(p, 0, t) + n_t * events_by(p, 1, t)

    if expected(p.horizon) < events - 1e-9:
        return None
    lo, hi = 0.0, p.horizon
    for _ in range(200):  # bisection: expected(t) is increasing; 200 halvings reach rounding
        mid = 0.5 * (lo + hi)
        if expected(mid) < events:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-12 * max(1.0, p.horizon):
            break
    return hi


def lakatos_drift(p: Profile, ratio: float, hr: float | None = None) -> tuple[float, float]:
    """Return (E[U]/N, V/N) of the log-rank statistic per randomized subject (see the module)."""
    w_c, w_t = 1.0 / (1.0 + ratio), ratio / (1.0 + ratio)
    sc, rc = pieces(p, 0)
    st, rt = pieces(p, 1, hr)
    T = p.horizon

    def rate(u, starts, rates):
        return rates[np.clip(np.searchsorted(starts, u, side="right") - 1, 0, len(starts) - 1)]

    def parts(u: np.ndarray):
        censor = enrolled_share(p, T - u)  # P(still under follow-up at u): entered by T − u
        r_c = w_c * at_risk(u, sc, rc, p.loss[0]) * censor
        r_t = w_t * at_risk(u, st, rt, p.loss[1]) * censor
        d_c, d_t = r_c * rate(u, sc, rc), r_t * rate(u, st, rt)
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(r_c + r_t > 0, r_t / (r_c + r_t), 0.0)
        return d_t - share * (d_c + d_t), share * (1 - share) * (d_c + d_t)

    knots = [0.0, T, *sc, *st, *[T - e for e in _accrual_edges(p) if 0 < T - e < T]]
    knots = [k for k in knots if 0 <= k <= T]
    mean = _quad(lambda u: parts(u)[0], knots)
    var = _quad(lambda u: parts(u)[1], knots)
    return mean, var


def drift(p: Profile, ratio: float, hr: float | None = None) -> float:
    """|E[Z]| per √N (total randomized): the standardized log-rank mean per subject."""
    mean, var = lakatos_drift(p, ratio, hr)
    return abs(mean) / math.sqrt(var) if var > 0 else 0.0
