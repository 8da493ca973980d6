"""The n search for simulated power: analytic start, geometric bracket, integer bisection.

The search index ``m`` is the size of the first arm; the caller maps it to per-arm sizes. All
candidates are evaluated on common random numbers, so estimated power moves smoothly with m
and bisection is meaningful. The answer is confirmed with the full replicate count at m and
m − 1; a contradiction gallops and bisects at full replicates until the pair agrees (bounded).
``smallest_effect`` does the same on a continuous effect scale at a fixed n.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

from .errors import QuestionError

Z95 = 1.959963984540054
MAX_CANDIDATES = 15  # search-stage evaluations; a good start needs 3–7
MAX_MOVES = 12  # extra full-replicate runs the confirmation may make
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
    confirmation batches) asks the caller to add its type I check at that m to the same batch.
    Never scans m linearly.
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

    m0 = min(max(round(start), m_min), m_max)
    lo, hi = _bracket(ok, m0, m_min, m_max)
    hi = _bisect_whole(ok, lo, hi)
    _confirm(evaluate, result, hi, m_min, m_max, target, rule, replicates)
    if len(result.candidates) > MAX_CANDIDATES:
        result.warnings.append(
            f"the search needed {len(result.candidates)} candidates; the starting point was far "
            "from the simulated answer"
        )
    return result


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
        f"simulated power stays below the target at {m_max:,} in the first arm; the effect is "
        "too small for this data model (or the test cannot detect it)",
    )


def _confirm(evaluate, result: SearchResult, m: int, m_min, m_max, target, rule, replicates):
    """Confirm m against m − 1 with full replicates; on a contradiction, gallop then bisect.

    The moves use full replicates too, so the final pair (m, m − 1) is consistent at the
    replicate count the answer reports; at most MAX_MOVES extra evaluations are made.
    """
    # Sizes below m_min fail without a run, as the gallop down needs.
    ok = _FullRuns(evaluate, result, m_min - 1, target, rule, replicates)
    full = ok.full
    pair = [m, m - 1] if m - 1 >= m_min else [m]
    full.update(zip(pair, evaluate(pair, replicates, m), strict=True))
    try:
        if not ok(m):  # too small: gallop up from m
            above = QuestionError(
                "target_power", f"simulated power stays below the target at {m_max:,}"
            )
            lo, hi = _gallop_up(ok, m, 1, lambda x, step: min(m_max, x + step), above)
        elif m - 1 >= m_min and ok(m - 1):  # more than enough: gallop down from m − 1
            lo, hi = _gallop_down(ok, m - 1, 1, m_min - 1)
        else:
            lo, hi = m - 1, m
        m = _bisect_whole(ok, lo, hi)
    except _Unsettled:
        result.warnings.append(
            f"the confirmation did not settle within {MAX_MOVES} extra runs; the reported n is the "
            "smallest examined whose power met the target"
        )
        passing = ok.passing()
        m = min(passing) if passing else max(full)
    if m == m_min and meets(full[m], target, rule, replicates):
        result.warnings.append(
            f"the target is already met at the smallest size the test allows ({m_min})"
        )
    result.m = m
    result.confirmation = [(x, full[x]) for x in (m, m - 1) if x in full]


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


def _bisect_whole(ok, lo: int, hi: int) -> int:
    """Return the smallest passing whole number in (lo, hi], ok(hi) true and ok(lo) false."""
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if ok(mid):
            hi = mid
        else:
            lo = mid
    return hi


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
