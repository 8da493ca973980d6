"""The n search for simulated power: analytic start, geometric bracket, integer bisection.

The search index ``m`` is the size of the first arm; the caller maps it to per-arm sizes. All
candidates are evaluated on common random numbers, so estimated power moves smoothly with m
and bisection is meaningful. The answer is confirmed with the full replicate count at m and
m − 1; a contradiction gallops and bisects at full replicates until the pair agrees (bounded).
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
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if ok(mid):
            hi = mid
        else:
            lo = mid
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
    full: dict[int, Estimate] = {}

    def ok(x: int, null_at: int | None = None) -> bool:
        if x not in full:
            if result.moves >= MAX_MOVES:
                raise _Unsettled
            (full[x],) = evaluate([x], replicates, null_at)
            result.moves += 1
        return meets(full[x], target, rule, replicates)

    pair = [m, m - 1] if m - 1 >= m_min else [m]
    full.update(zip(pair, evaluate(pair, replicates, m), strict=True))
    try:
        if not ok(m):  # too small: gallop up from m
            lo, step = m, 1
            while True:
                hi = min(m_max, lo + step)
                if ok(hi):
                    break
                if hi == m_max:
                    raise QuestionError(
                        "target_power", f"simulated power stays below the target at {m_max:,}"
                    )
                lo, step = hi, step * 2
        elif m - 1 >= m_min and ok(m - 1):  # more than enough: gallop down from m − 1
            hi, step = m - 1, 1
            while True:
                lo = max(m_min - 1, hi - step)
                if lo < m_min or not ok(lo):
                    break
                hi, step = lo, step * 2
        else:
            lo, hi = m - 1, m
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if ok(mid):
                hi = mid
            else:
                lo = mid
        m = hi
    except _Unsettled:
        result.warnings.append(
            f"the confirmation did not settle within {MAX_MOVES} extra runs; the reported n is the "
            "smallest examined whose power met the target"
        )
        passing = [x for x, e in full.items() if meets(e, target, rule, replicates)]
        m = min(passing) if passing else max(full)
    if m == m_min and meets(full[m], target, rule, replicates):
        result.warnings.append(
            f"the target is already met at the smallest size the test allows ({m_min})"
        )
    result.m = m
    result.confirmation = [(x, full[x]) for x in (m, m - 1) if x in full]


class _Unsettled(Exception):
    """Internal: the confirmation used up its extra runs."""
