"""The n search for simulated power: analytic start, geometric bracket, fitted power curve.

The search index ``m`` is the size of the first group; the caller maps it to per-group sizes. All
candidates are evaluated on common random numbers, so estimated power moves smoothly with m.
The search stage narrows the bracket at the search replicates by jumping to the crossing of a
probit-on-√m line and stops once candidates differ by less than their Monte Carlo error; the
confirmation stage finds, at the full count, an m that meets the target while m − 1 does not,
stepping by the slope the full runs show (bounded), or, where neighbouring sizes differ by less
than the Monte Carlo error of a full run, settles on the smallest passing size after one hedged
pair of full runs. ``smallest_effect`` brackets, bisects and confirms (gallop, then bisect) on a
continuous effect scale at a fixed n.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from statistics import NormalDist

from .errors import QuestionError

Z95 = 1.959963984540054
MAX_CANDIDATES = 15  # search-stage evaluations; a good start needs 3–7
MAX_MOVES = 12  # extra full-replicate runs the effect confirmation may make
MAX_N_MOVES = 8  # extra full-replicate runs the n confirmation may make (3–4 typical)
SETTLE_LOW, SETTLE_HIGH = 0.5, 2.0  # a settling pair's sizes, in prediction errors above it
_STEPS = (0.1, 0.25, 0.6, 1.5, 4.0, 9.0)  # relative bracket steps, growing geometrically


@dataclass(frozen=True)
class Estimate:
    """A simulated rejection rate: ``rejections`` out of ``replicates``."""

    rejections: int
    replicates: int

    @property
    def power(self) -> float:
        """Return the estimated rejection rate."""
        return self.rejections / self.replicates

    @property
    def mcse(self) -> float:
        """Return the Monte Carlo standard error √(p(1 − p)/R) (Morris, White & Crowther 2019)."""
        p = self.power
        return math.sqrt(p * (1 - p) / self.replicates)

    @property
    def ci95(self) -> list[float]:
        """Return the 95% Wilson score interval of the rate."""
        return wilson(self.rejections, self.replicates)


def wilson(successes: int, n: int, z: float = Z95) -> list[float]:
    """Return the Wilson score interval [lo, hi] for ``successes`` out of ``n``."""
    p = successes / n
    z2 = z * z
    mid = (p + z2 / (2 * n)) / (1 + z2 / n)
    half = z / (1 + z2 / n) * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    return [max(0.0, mid - half), min(1.0, mid + half)]


def meets(est: Estimate, target: float, rule: str, final_replicates: int) -> bool:
    """True when ``est`` reaches ``target`` under the decision rule.

    With ``lower_bound`` the Wilson bound is computed as if the estimate had
    ``final_replicates``, so a small search run aims at what the confirmation will demand.
    """
    if rule == "point":
        return est.power >= target
    p = est.power
    return wilson(round(p * final_replicates), final_replicates)[0] >= target


@dataclass
class SearchResult:
    """The chosen m, every evaluation made, and the confirmation pair."""

    m: int
    candidates: list[tuple[int, Estimate]] = field(default_factory=list)
    confirmation: list[tuple[int, Estimate]] = field(default_factory=list)
    moves: int = 0
    warnings: list[str] = field(default_factory=list)
    settled: dict | None = None  # set when the confirmation stopped below Monte Carlo noise


def smallest_n(
    evaluate: Callable[[list[int], int, int | None], list[Estimate]],
    *,
    start: float,
    m_min: int,
    m_max: int,
    target: float,
    rule: str,
    search_replicates: int,
    replicates: int,
) -> SearchResult:
    """Return the smallest m whose simulated power meets ``target``, confirmed at full replicates.

    ``evaluate(ms, replicates, null_at)`` returns one Estimate per m; ``null_at`` (set only in
    a confirmation batch expected to be the last) asks the caller to add its type I check at
    that m to the same batch. Never scans m linearly.

    Two stages, both on common random numbers. The search stage brackets the answer at
    ``search_replicates`` and narrows the bracket by jumping to the crossing of a probit power
    curve fitted against √m, and stops once the bracket's ends differ by less than one Monte
    Carlo standard error: below that, a smaller run cannot tell candidates apart. The
    confirmation stage then finds, at full replicates, an m that meets the target while m − 1
    does not, stepping by the fitted slope and interpolating between the runs it has made
    (at most MAX_N_MOVES runs beyond the first).
    """
    if not m_min <= m_max:
        raise ValueError("m_min must not exceed m_max")
    seen: dict[int, Estimate] = {}
    result = SearchResult(m=0)

    def ok(m: int) -> bool:
        if m not in seen:
            if len(seen) >= MAX_CANDIDATES + 10:
                raise QuestionError(
                    "target_power",
                    f"the simulated search did not settle within {len(seen)} candidates; "
                    "check the data model or raise simulation.search_replicates",
                )
            (est,) = evaluate([m], search_replicates, None)
            seen[m] = est
            result.candidates.append((m, est))
        return meets(seen[m], target, rule, replicates)

    goal = _effective_target(target, rule, replicates)
    m0 = min(max(round(start), m_min), m_max)
    lo, hi = _bracket(ok, m0, m_min, m_max)
    guess, slope = _narrow(ok, seen, lo, hi, goal, search_replicates)
    _confirm_n(
        evaluate,
        result,
        guess,
        slope,
        m_min,
        m_max,
        target,
        rule,
        replicates,
        search_replicates,
        _slope_error(seen, search_replicates),
    )
    if len(result.candidates) > MAX_CANDIDATES:
        result.warnings.append(
            f"the search needed {len(result.candidates)} candidates; the starting point was far "
            "from the simulated answer"
        )
    return result


def _effective_target(target: float, rule: str, replicates: int) -> float:
    """Return the rejection rate at full replicates that the decision rule needs."""
    if rule == "point":
        return target
    lo, hi = 0, replicates  # smallest k whose Wilson lower bound reaches the target
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if wilson(mid, replicates)[0] >= target:
            hi = mid
        else:
            lo = mid
    return hi / replicates


def _fit(points: list[tuple[int, Estimate]], goal: float) -> tuple[float, float] | None:
    """Fit probit(power) = a + b·√m by weighted least squares; return (crossing m, slope there).

    Under a normal approximation the probit of power is linear in √m for shift alternatives,
    so a straight line through a few candidates predicts where the target is crossed. Points
    at 0 or 1 carry no slope information and are left out; the weights are the inverse
    binomial variances of the probits. None when the points cannot define an increasing line.
    """
    xs, ys, ws = [], [], []
    for m, e in points:
        k, r = e.rejections, e.replicates
        if 0 < k < r and m > 0:
            p = k / r
            z = _ndtri(p)
            xs.append(math.sqrt(m))
            ys.append(z)
            ws.append(_phi(z) ** 2 * r / (p * (1 - p)))
    if len(xs) < 2:
        return None
    sw = sum(ws)
    mx = sum(w * x for w, x in zip(ws, xs, strict=True)) / sw
    my = sum(w * y for w, y in zip(ws, ys, strict=True)) / sw
    sxx = sum(w * (x - mx) ** 2 for w, x in zip(ws, xs, strict=True))
    sxy = sum(w * (x - mx) * (y - my) for w, x, y in zip(ws, xs, ys, strict=True))
    if sxx <= 0 or sxy <= 0:
        return None
    b = sxy / sxx
    root = mx + (_ndtri(goal) - my) / b
    if root <= 0:
        return None
    m = root * root
    return m, _phi(_ndtri(goal)) * b / (2 * root)  # d power / d m at the crossing


def _slope_error(seen: dict[int, Estimate], reps: int) -> float:
    """The fitted slope's relative error, from the replicates that flip across the candidates.

    On common random numbers the power difference between the candidates farthest apart in
    power is carried by about (p_max − p_min) × replicates flipping replicates, so the slope it
    implies is good to about 1/√flips; at most 25% and at least 10% (the probit line is a model).
    """
    powers = [e.power for e in seen.values()]
    flips = (max(powers) - min(powers)) * reps if powers else 0.0
    return min(0.25, max(0.1, 1 / math.sqrt(flips))) if flips > 0 else 0.25


def _ndtri(p: float) -> float:
    return NormalDist().inv_cdf(p)


def _phi(z: float) -> float:
    return math.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)


def _narrow(ok, seen: dict[int, Estimate], lo: int, hi: int, goal: float, reps: int):
    """Narrow (lo, hi] at search replicates; return (first m to confirm, fitted slope or None).

    Each step evaluates the fitted crossing (bisection when no line fits or the fit stalls);
    it stops when hi − lo = 1 or when the ends differ by less than one Monte Carlo standard
    error of a run at the goal: further candidates would only chase noise.
    """
    mcse = math.sqrt(goal * (1 - goal) / reps)
    fit = None
    stalls = 0
    last = hi
    while hi - lo > 1:
        fit = _fit(list(seen.items()), goal)
        if lo in seen and seen[hi].power - seen[lo].power < mcse:
            break  # the ends cannot be told apart at this replicate count
        if fit is not None and abs(seen[last].power - goal) < mcse:
            break  # the last candidate is within noise of the target: the fit is as good as it gets
        width = hi - lo
        if fit is None or stalls >= 2:
            mid = (lo + hi) // 2
        else:
            mid = min(hi - 1, max(lo + 1, math.ceil(fit[0])))
        last = mid
        if ok(mid):
            hi = mid
        else:
            lo = mid
        stalls = stalls + 1 if hi - lo > width / 2 else 0
    fit = _fit(list(seen.items()), goal)
    if fit is None:
        return hi, None
    return min(float(hi), max(float(lo), fit[0])), fit[1]


def _confirm_n(
    evaluate, result, c: float, slope, m_min, m_max, target, rule, reps, search_reps, fit_error
):
    """Find, at full replicates, an m that meets the target while m − 1 does not, or settle.

    ``c`` is the predicted crossing and ``slope`` the power gained per unit of m there (None
    when the search stage could not fit one); ``fit_error`` is the slope's relative error. Each
    step predicts the crossing c and its error u in sizes: at first from the search stage (its
    Monte Carlo error over the slope), then from the full run nearest the target, stepping by
    the slope between the two full runs farthest apart. Common random numbers make the
    rejection count grow almost steadily with m: between two sizes d apart about
    d × slope × replicates replicates flip, so the step's error is about √(d / (slope ×
    replicates)) sizes, plus the slope's own error. When [c − u, c + u] lies within one size,
    the pair (m, m − 1) runs in one batch, with the type I check when [c − 2u, c + 2u] does;
    otherwise one size runs and informs the next step.

    When one size gains less power than the Monte Carlo standard error of a full run (large n),
    the exact integer crossing is below the noise and chasing it wastes full runs. Then the
    first full run is placed on a search candidate near c when one lies within u/2 (its chunks
    are reused), and after it one batch runs two sizes at SETTLE_LOW and SETTLE_HIGH prediction
    errors above the new prediction (rounded up; one apart at least, never further apart than
    one MCSE of power): with a normal prediction error the lower meets the target 69% of the
    time, the upper 98%. Once that pair has run, the search settles as soon as any full run
    meets the target, on the smallest size run at the full count whose power met it, and
    ``result.settled`` records the pair, the slope, the MCSE and the largest failing full run
    below (n − 1 is not run unless the pair brackets exactly). At most MAX_N_MOVES runs follow
    the first batch; if they run out, the smallest passing size is reported with a warning.
    """
    full: dict[int, Estimate] = {}
    goal = _effective_target(target, rule, reps)
    mcse = math.sqrt(goal * (1 - goal) / reps)  # of one full run at the goal
    u = math.sqrt(goal * (1 - goal) / search_reps) / slope if slope else 0.0
    first, fitted = True, slope
    pair: tuple[int, int] | None = None  # the settling pair, once run
    lost: Exception | None = None
    while True:
        hi = min((x for x in full if _passes(full, x, target, rule, reps)), default=None)
        below = (x for x in full if not _passes(full, x, target, rule, reps))
        lo = max((x for x in below if hi is None or x < hi), default=m_min - 1)
        if hi is not None and hi - lo == 1 or result.moves >= MAX_N_MOVES:
            break
        if pair is not None and hi is not None:  # below the noise: the smallest passing run
            result.settled = _settled(full, pair, hi, lo, mcse, slope)
            break
        if not first:
            slope = _secant(full, fitted, reps)
            c, u = _predict(full, lo, hi, goal, slope, reps, result.moves, fit_error)
        if hi is None and lo >= m_max:
            lost = QuestionError(
                "target_power", f"simulated power stays below the target at {m_max:,}"
            )
            break
        if not first and pair is None and slope and slope < mcse and math.isfinite(u):
            top = m_max if hi is None else hi
            b = min(top, max(lo + 2, m_min + 1, math.ceil(c + SETTLE_HIGH * u - 1e-9)))
            a = min(b - 1, math.ceil(c + SETTLE_LOW * u - 1e-9))
            a = max(lo + 1, m_min, a, b - max(1, math.floor(mcse / slope)))
            pair = (a, b)
            xs = [v for v in dict.fromkeys(pair) if v not in full]
            full.update(zip(xs, evaluate(xs, reps, None), strict=True))
            result.moves += len(xs)
            continue
        x = max(lo + 1, min(m_max if hi is None else hi, math.ceil(c - 1e-9)))
        if first and slope and slope < mcse:  # will settle: probe where a candidate already ran
            x = min((m for m, _ in result.candidates), key=lambda m: (abs(m - c), m), default=x)
            x = x if abs(x - c) <= u / 2 else max(lo + 1, min(m_max, math.ceil(c - 1e-9)))
        near = x - 1 < c - u and c + u <= x
        null_at = x if x - 1 < c - 2 * u and c + 2 * u <= x else None
        if x == hi:
            xs = [x - 1]
        elif near and x - 1 > lo and x - 1 >= m_min:
            xs = [x, x - 1]
        else:
            xs = [x]
        got = evaluate(xs, reps, null_at)
        full.update(zip(xs, got, strict=True))
        if not first:
            result.moves += len(xs)
        first = False
    if lost is not None:
        raise lost
    passing = [x for x in full if _passes(full, x, target, rule, reps)]
    if result.settled is None and (hi is None or hi - lo != 1):
        result.warnings.append(
            f"the confirmation did not settle within {MAX_N_MOVES} extra runs; the reported n is "
            "the smallest examined whose power met the target"
        )
        hi = min(passing) if passing else max(full)
    if hi == m_min and _passes(full, hi, target, rule, reps):
        result.warnings.append(
            f"the target is already met at the smallest size the test allows ({m_min})"
        )
    result.m = hi
    if result.settled is not None:
        result.confirmation = [(x, full[x]) for x in (hi, lo) if x in full]
    else:
        result.confirmation = [(x, full[x]) for x in (hi, hi - 1) if x in full]


def _settled(full: dict, pair: tuple[int, int], hi: int, lo: int, mcse: float, slope) -> dict:
    """The record of a confirmation that stopped because neighbouring sizes are within noise."""
    return {
        "pair": [(x, full[x]) for x in pair],
        "power_per_size": slope,
        "mcse": mcse,
        "sizes_per_mcse": mcse / slope,
        "failing_below": (lo, full[lo]) if lo in full else None,
    }


def _passes(full: dict, x: int, target: float, rule: str, reps: int) -> bool:
    return meets(full[x], target, rule, reps)


def _predict(full, lo: int, hi, goal: float, slope, reps: int, moves: int, fit_error=0.25):
    """Return (predicted crossing, its error in sizes) stepping from the run nearest the goal.

    ``fit_error`` is the relative error of the slope while only one full run exists.
    """
    rate = slope * reps if slope and slope > 0 else 0.0  # replicates flipping per size
    ends = [x for x in (lo, hi) if x in full]
    x0 = min(ends, key=lambda x: abs(full[x].power - goal))
    if not rate:  # no slope to go by: bisect a bracket, else gallop (1, 2, 4 … sizes)
        if hi is not None and lo in full:
            return (lo + hi) / 2, math.inf
        step = 2.0**moves
        return (lo + step if hi is None else hi - step), math.inf
    c = x0 + (goal - full[x0].power) / slope
    if hi is None or lo not in full:  # not bracketed yet: step past, doubling on repeats
        c = x0 + (c - x0) * 2 ** max(0, moves - 2)
    elif not lo < c <= hi:
        c = (lo + hi) / 2
    d = abs(c - x0)
    span = max(full) - min(full)
    slope_error = fit_error if span == 0 else 1 / math.sqrt(rate * span)  # relative
    # + ½: even at d = 0 the neighbour shares the count with probability e^(−rate)
    return c, math.sqrt((d + 0.5) / rate + (d * slope_error) ** 2)


def _secant(full: dict[int, Estimate], fitted, reps: int):
    """The slope between the two full runs farthest apart, pooled with the fitted one.

    Each is weighted by its precision: the fitted slope's relative error is taken as 25%, the
    secant's as 1/√(replicates flipping between the two runs).
    """
    if len(full) < 2:
        return fitted
    a, b = min(full), max(full)
    rise = (full[b].power - full[a].power) / (b - a)
    if rise <= 0:
        return fitted
    if not fitted or fitted <= 0:
        return rise
    w_fit = 1 / 0.25**2
    w_rise = rise * reps * (b - a)  # 1 / relative variance of the secant
    return (w_fit * fitted + w_rise * rise) / (w_fit + w_rise)


def _bracket(ok: Callable[[int], bool], m0: int, m_min: int, m_max: int) -> tuple[int, int]:
    """Return (lo, hi) with ok(hi) true and ok(lo) false (lo = m_min − 1 when m_min is enough)."""
    if ok(m0):
        hi = m0
        for step in _STEPS:
            if hi == m_min:
                return m_min - 1, m_min
            m = max(m_min, min(hi - 1, math.floor(hi / (1 + step))))
            if not ok(m):
                return m, hi
            hi = m
        while hi > m_min:  # far above: halve (still geometric, never linear)
            m = max(m_min, hi // 2)
            if not ok(m):
                return m, hi
            hi = m
        return m_min - 1, m_min
    lo = m0
    for step in (*_STEPS, *([9.0] * 20)):
        if lo == m_max:
            break
        m = min(m_max, max(lo + 1, math.ceil(lo * (1 + step))))
        if ok(m):
            return lo, m
        lo = m
    raise QuestionError(
        "target_power",
        f"simulated power stays below the target at {m_max:,} in the first group; the effect is "
        "too small for this data model (or the test cannot detect it)",
    )


class _Unsettled(Exception):
    """Internal: the confirmation used up its extra runs."""


class _FullRuns:
    """The confirmation's memoised verdicts at full replicates, at most MAX_MOVES new runs.

    A point at or below ``floor`` fails without a run (the null for effects, below m_min for n).
    """

    def __init__(self, evaluate, result, floor: float, target: float, rule: str, replicates: int):
        self.evaluate, self.result, self.floor = evaluate, result, floor
        self.target, self.rule, self.replicates = target, rule, replicates
        self.full: dict = {}

    def __call__(self, x: float) -> bool:
        """True when x meets the target at full replicates; raise _Unsettled when out of runs."""
        if x <= self.floor:
            return False
        if x not in self.full:
            if self.result.moves >= MAX_MOVES:
                raise _Unsettled
            (self.full[x],) = self.evaluate([x], self.replicates, None)
            self.result.moves += 1
        return meets(self.full[x], self.target, self.rule, self.replicates)

    def passing(self) -> list:
        """Return the points run so far whose power met the target."""
        return [
            x for x, e in self.full.items() if meets(e, self.target, self.rule, self.replicates)
        ]


def _gallop_up(ok, x, step, advance, stuck: Exception):
    """From a failing x, double the step until a point passes: return (last failing, passing).

    ``advance(x, step)`` gives the next point; when it cannot move past x, ``stuck`` is raised.
    """
    while True:
        nxt = advance(x, step)
        if nxt == x:
            raise stuck
        if ok(nxt):
            return x, nxt
        x, step = nxt, step * 2


def _gallop_down(ok, x, step, floor):
    """From a passing x, double the step down until a point fails: return (failing, last passing).

    ``ok(floor)`` must be false, so the gallop stops there at the latest.
    """
    while True:
        nxt = max(floor, x - step)
        if not ok(nxt):
            return nxt, x
        x, step = nxt, step * 2


# --- the effect search -----------------------------------------------------------------------

EFFECT_TOLERANCE = 0.01  # stop bisecting when the bracket is narrower than 1% of the effect
EFFECT_STEPS = 20  # bisection steps per stage, at most
_REACH = 30  # bracket expansions before the target is declared out of reach


@dataclass
class EffectSearchResult:
    """The chosen effect distance, its bracket, every evaluation made, and the confirmation."""

    x: float
    lo: float
    candidates: list[tuple[float, Estimate]] = field(default_factory=list)
    confirmation: list[tuple[float, Estimate]] = field(default_factory=list)
    moves: int = 0
    warnings: list[str] = field(default_factory=list)


def smallest_effect(
    evaluate: Callable[[list[float], int, float | None], list[Estimate]],
    *,
    start: float,
    x_max: float,
    inclusive: bool,
    target: float,
    rule: str,
    search_replicates: int,
    replicates: int,
    unreachable: Callable[[], Exception],
) -> EffectSearchResult:
    """Return the smallest distance x from the null whose simulated power meets ``target``.

    ``x`` is the effect's distance from its null value in the direction where power grows; the
    caller maps it to the effect field. x = 0 is the null itself, whose rejection rate is the
    type I error and so never meets a target above alpha: it is a failing end with no run.
    ``x_max`` bounds the distance (``inf`` when unbounded); an exclusive bound is approached by
    halving the gap. Candidates share common random numbers, so power is a monotone step
    function of x and bisection is meaningful. ``evaluate(xs, replicates, null_at)`` returns one
    Estimate per x; ``null_at`` (set in the first confirmation batch) asks the caller to add its
    type I check to that batch. ``unreachable()`` builds the error raised when no x meets the
    target.
    """
    result = EffectSearchResult(x=0.0, lo=0.0)
    seen: dict[float, Estimate] = {}

    def ok(x: float) -> bool:
        if x <= 0:
            return False
        if x not in seen:
            (seen[x],) = evaluate([x], search_replicates, None)
            result.candidates.append((x, seen[x]))
        return meets(seen[x], target, rule, replicates)

    def grow(x: float, step: float) -> float:
        nxt = x * (1 + step)
        if nxt < x_max:
            return nxt
        return x_max if inclusive else (x + x_max) / 2

    x0 = start if math.isfinite(start) and 0 < start < x_max else _inside(x_max)
    if inclusive and start >= x_max:
        x0 = x_max
    lo, hi = _effect_bracket(ok, grow, x0, x_max, inclusive, unreachable)
    lo, hi = _bisect(ok, lo, hi)
    _confirm_effect(evaluate, result, lo, hi, x_max, inclusive, target, rule, replicates)
    return result


def _inside(x_max: float) -> float:
    return 1.0 if not math.isfinite(x_max) else x_max / 2


def _effect_bracket(ok, grow, x0: float, x_max: float, inclusive: bool, unreachable):
    """Return (lo, hi) with ok(hi) true and ok(lo) false (lo = 0, the null, when far below x0)."""
    if ok(x0):
        hi = x0
        for step in _STEPS:
            x = hi / (1 + step)
            if not ok(x):
                return x, hi
            hi = x
        return 0.0, hi
    lo = x0
    for i in range(_REACH):
        step = _STEPS[i] if i < len(_STEPS) else _STEPS[-1]
        x = grow(lo, step)
        if ok(x):
            return lo, x
        if x == lo or (inclusive and x >= x_max):
            break
        lo = x
    raise unreachable()


def _bisect(ok, lo: float, hi: float) -> tuple[float, float]:
    """Halve [lo, hi] (ok(hi) true, ok(lo) false) until narrower than the tolerance or out of steps."""
    for _ in range(EFFECT_STEPS):
        if hi - lo <= EFFECT_TOLERANCE * hi:
            break
        mid = (lo + hi) / 2
        if ok(mid):
            hi = mid
        else:
            lo = mid
    return lo, hi


def _confirm_effect(evaluate, result, lo, hi, x_max, inclusive, target, rule, replicates):
    """Confirm the bracket with full replicates; on a contradiction, gallop then bisect.

    As in the n search, the moves use full replicates so the reported bracket is consistent at
    the replicate count the answer reports; at most MAX_MOVES extra evaluations are made.
    """
    ok = _FullRuns(evaluate, result, 0.0, target, rule, replicates)
    full = ok.full

    def toward(x: float, step: float) -> float:
        if x + step < x_max:
            return x + step
        return x_max if inclusive else (x + x_max) / 2

    short = QuestionError(
        "target_power",
        f"simulated power stays below the target {target:g} at the confirmation and no larger "
        "effect in the allowed range was found to reach it",
    )
    pair = [hi, lo] if lo > 0 else [hi]
    full.update(zip(pair, evaluate(pair, replicates, hi), strict=True))
    width = max(hi - lo, EFFECT_TOLERANCE * hi)
    try:
        if not ok(hi):  # the search stage stopped short: gallop up
            lo, hi = _gallop_up(ok, hi, width, toward, short)
        elif ok(lo):  # more than enough already at lo: gallop down
            lo, hi = _gallop_down(ok, lo, width, 0.0)
        lo, hi = _bisect(ok, lo, hi)
    except _Unsettled:
        result.warnings.append(
            f"the confirmation did not settle within {MAX_MOVES} extra runs; the reported effect "
            "is the smallest examined whose power met the target"
        )
        passing = ok.passing()
        if not passing:
            raise short from None
        hi = min(passing)
        below = [x for x in full if x < hi]
        lo = max(below) if below else 0.0
    result.x, result.lo = hi, lo
    result.confirmation = [(x, full[x]) for x in (hi, lo) if x in full]
