"""Precision questions: the n that makes a confidence interval narrow enough (issue 14).

Pure numpy/scipy. A cell that offers ``hypothesis.aim = "estimation"`` builds its answer from
these pieces (``designs.base.Estimation``); ``record_block`` assembles the record's
``precision`` block for every cell the same way.

Half-widths are half the interval's length, on the estimand's own scale. The sizes passed in
are analyzed sizes and may be fractional (after dropout); the functions are continuous in n, so
the smallest whole n is the solved value rounded up (every half-width here falls as n grows).

- A mean (t interval, one sample or two groups pooled): half-width t·s·k with
  k = 1/√n or √(1/n₁ + 1/n₂) on df degrees of freedom. Its expectation uses
  E[s] = c4·σ (the exact mean of a sample SD of normal data); with an assurance γ the
  half-width is at most the target with probability γ, (df·s²/σ² is χ² on df), as proposed by
  Kupper & Hafner (1989), Am Stat 43:101.
- A proportion (Wilson 1927 score interval; Clopper & Pearson 1934 exact interval): the
  half-width the interval has when the observed proportion equals the planned one (the count
  n·p, not rounded).
- A difference of proportions: Newcombe's (1998, method 10) hybrid score interval built from
  the two Wilson intervals, at the planned proportions.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import optimize, special, stats

from .errors import QuestionError

__all__ = [
    "PROPORTION_METHODS",
    "c4",
    "clopper_pearson_half_width",
    "mean_precision",
    "newcombe_half_width",
    "proportion_half_width",
    "proportion_interval",
    "proportion_interval_solution",
    "record_block",
    "solve_size",
    "t_interval",
    "t_interval_solution",
    "wilson_half_width",
]

MAX_SIZE = 1e9  # the schema's largest group size
PROPORTION_METHODS = ("wilson", "clopper_pearson")


def z_of(confidence: float) -> float:
    """The standard normal quantile of a two-sided interval of this confidence."""
    return float(stats.norm.ppf(0.5 + confidence / 2.0))


def c4(df: float) -> float:
    """E[s]/σ for a sample SD on ``df`` degrees of freedom from normal data."""
    return float(
        math.sqrt(2.0 / df) * math.exp(special.gammaln((df + 1) / 2) - special.gammaln(df / 2))
    )


# --- a mean: the t interval --------------------------------------------------------------------


def mean_precision(
    sd: float,
    scale: float,
    df: float,
    confidence: float,
    target: float | None = None,
    assurance: float | None = None,
) -> dict:
    """The t interval's half-width t·s·scale on ``df`` degrees of freedom, as a record part.

    ``half_width_expected`` = t·c4(df)·σ·scale; ``half_width_assured`` = the half-width not
    exceeded with probability ``assurance`` (None without it); ``probability`` = P(half-width
    ≤ target) (None without a target).

    >>> round(mean_precision(10.0, 1 / 10, 99, 0.95)["half_width_expected"], 4)
    1.9792
    """
    t = float(stats.t.ppf(0.5 + confidence / 2.0, df))
    plug_in = t * sd * scale
    out = {
        "half_width_expected": plug_in * c4(df),
        "half_width_assured": None,
        "probability": None,
    }
    if assurance is not None:
        out["half_width_assured"] = plug_in * math.sqrt(float(stats.chi2.ppf(assurance, df)) / df)
    if target is not None:
        out["probability"] = float(stats.chi2.cdf(df * (target / plug_in) ** 2, df))
    return out


def t_interval(q: dict, sd: float, per_group: list[float]) -> dict:
    """The t interval of one group's mean, or of a difference in means (two groups, pooled
    variance), at the analyzed sizes: ``mean_precision`` plus its ``basis`` in words."""
    hyp = q["hypothesis"]
    if len(per_group) == 1:
        n = float(per_group[0])
        scale, df = 1.0 / math.sqrt(n), n - 1.0
        basis = "on average (t·E[s]/√n, E[s] = c4·SD for normal data on n − 1 degrees of freedom)"
    else:
        n1, n2 = (float(x) for x in per_group)
        scale, df = math.sqrt(1.0 / n1 + 1.0 / n2), n1 + n2 - 2.0
        basis = (
            "on average (t·E[s_pooled]·√(1/n₁ + 1/n₂), E[s_pooled] = c4·SD for normal data on "
            "n₁ + n₂ − 2 degrees of freedom)"
        )
    part = mean_precision(
        sd, scale, df, hyp["confidence"], hyp.get("half_width"), hyp.get("assurance")
    )
    return {**part, "basis": basis}


def t_interval_solution(q: dict, sd: float, allocation: list[float]):
    """The raw sizes (a ``Solution``, groups in ``allocation``'s proportions) whose t interval
    has an expected half-width of at most the target, or reaches it with the assurance."""
    from .designs.base import Solution

    hyp = q["hypothesis"]
    floor = max(2.0 / a for a in allocation)  # every group at least 2

    def part(n: float) -> dict:
        return t_interval(q, sd, [n * a for a in allocation])

    if hyp.get("assurance") is None:
        n = solve_size(lambda n: part(n)["half_width_expected"], hyp["half_width"], floor=floor)
    else:
        n = solve_size(lambda n: part(n)["probability"], hyp["assurance"], floor=floor, falls=False)
    return Solution(per_group=[n * a for a in allocation])


# --- a proportion: Wilson and Clopper-Pearson ------------------------------------------------


def wilson_half_width(p: float, n, confidence: float):
    """Half-width of the Wilson score interval when the observed proportion is ``p`` in ``n``."""
    z = z_of(confidence)
    n = np.asarray(n, dtype=float)
    return z * np.sqrt(n * p * (1 - p) + z * z / 4) / (n + z * z)


def wilson_limits(p: float, n, confidence: float):
    """The Wilson score interval's (lower, upper) at observed proportion ``p`` in ``n``."""
    z = z_of(confidence)
    n = np.asarray(n, dtype=float)
    center = (n * p + z * z / 2) / (n + z * z)
    half = wilson_half_width(p, n, confidence)
    return center - half, center + half


def clopper_pearson_half_width(p: float, n, confidence: float):
    """Half-width of the Clopper–Pearson interval at count n·p (not rounded) out of ``n``."""
    a = 1.0 - confidence
    n = np.asarray(n, dtype=float)
    x = n * p
    lower = stats.beta.ppf(a / 2, x, n - x + 1)
    upper = stats.beta.ppf(1 - a / 2, x + 1, n - x)
    return (upper - lower) / 2


def proportion_half_width(p: float, n, confidence: float, method: str):
    """The half-width of a proportion's interval (``method`` wilson or clopper_pearson)."""
    if method == "wilson":
        return wilson_half_width(p, n, confidence)
    if method == "clopper_pearson":
        return clopper_pearson_half_width(p, n, confidence)
    raise QuestionError(
        "analysis", f"must be one of {', '.join(PROPORTION_METHODS)}; got {method!r}"
    )


def proportion_interval_solution(p: float, half_width: float, confidence: float, method: str):
    """The raw n (a ``Solution``) whose interval around a planned ``p`` has at most this
    half-width; ready for the ``binary × single_group`` cell's ``solve_n``."""
    from .designs.base import Solution

    n = solve_size(
        lambda m: float(proportion_half_width(p, m, confidence, method)),
        half_width,
        floor=2.0,
    )
    return Solution(per_group=[n])


def proportion_interval(q: dict, p: float, per_group: list[float], method: str) -> dict:
    """A single proportion's interval at the analyzed size, as the cell's
    ``Estimation.precision`` returns it (``method`` wilson or clopper_pearson)."""
    return {
        "half_width_expected": float(
            proportion_half_width(p, float(per_group[0]), q["hypothesis"]["confidence"], method)
        ),
        "half_width_assured": None,
        "probability": None,
        "basis": "when the observed proportion equals the planned one (count n·p, not rounded)",
    }


def newcombe_half_width(p_control: float, p_treatment: float, sizes, confidence: float) -> float:
    """Half-width of Newcombe's hybrid score interval for p_treatment − p_control (method 10)."""
    n_c, n_t = (float(x) for x in sizes)
    l_c, u_c = wilson_limits(p_control, n_c, confidence)
    l_t, u_t = wilson_limits(p_treatment, n_t, confidence)
    below = math.sqrt((p_treatment - l_t) ** 2 + (u_c - p_control) ** 2)
    above = math.sqrt((u_t - p_treatment) ** 2 + (p_control - l_c) ** 2)
    return (below + above) / 2


# --- the search ------------------------------------------------------------------------------


def solve_size(
    half_width: Callable[[float], float],
    target: float,
    *,
    floor: float,
    field: str = "hypothesis.half_width",
    falls: bool = True,
) -> float:
    """The (fractional) size at which ``half_width(n)`` meets ``target``; ``floor`` when it
    already does there. ``falls``: the quantity falls with n (a half-width); False for a
    probability that rises with n, then ``target`` is the probability to reach.

    QuestionError on ``field`` when even the largest size accepted does not reach it.
    """

    def gap(n: float) -> float:
        value = half_width(n)
        return value - target if falls else target - value

    if gap(floor) <= 0:
        return floor
    hi = max(2 * floor, 16.0)
    while gap(hi) > 0:
        if hi >= MAX_SIZE:
            raise QuestionError(
                field,
                f"cannot be reached with up to {MAX_SIZE:,.0f} per group; got {target:g}: "
                "check its units and the assumed variability",
            )
        hi = min(hi * 4, MAX_SIZE)
    lo = max(floor, hi / 4) if hi > 16.0 else floor
    return float(optimize.brentq(gap, lo, hi, xtol=1e-10, rtol=1e-12))


# --- the record --------------------------------------------------------------------------------


def record_block(q: dict, design, per_group: list[float], label: str) -> dict:
    """The record's ``precision`` block at the analyzed sizes ``per_group``."""
    hyp = q["hypothesis"]
    part = design.estimation.precision(q, [float(n) for n in per_group])
    block = {
        "interval": label,
        "confidence": hyp["confidence"],
        "half_width_target": hyp.get("half_width"),
        "half_width_expected": part["half_width_expected"],
        "assurance": hyp.get("assurance"),
        "half_width_assured": part.get("half_width_assured"),
        "probability": part.get("probability"),
        "basis": part["basis"],
    }
    if part.get("intervals") is not None:  # several intervals at once (Estimation docstring)
        block["intervals"] = part["intervals"]
        block["wider"] = part["wider"]
    return block


def check(q: dict, design) -> None:
    """The engine's own check of a precision question (the schema checks the same, by field)."""
    from .designs.common import analysis_of, estimation_validate, raise_first

    hyp = q.get("hypothesis") or {}
    if hyp.get("aim") != "estimation":
        raise QuestionError("find", "precision applies only when hypothesis.aim is estimation")
    if design.estimation is None:
        raise QuestionError("hypothesis.aim", f"estimation is not offered for {design.cell}")
    if q["find"] not in ("sample_size", "precision"):
        raise QuestionError(
            "find", f"must be 'sample_size' or 'precision' for estimation; got {q['find']!r}"
        )
    if q.get("alternative", "two-sided") != "two-sided":
        raise QuestionError("alternative", "an interval is two-sided; got 'one-sided'")
    if q.get("method", "analytic") != "analytic":
        raise QuestionError("method", "estimation is answered analytically")
    adjustments = q.get("adjustments") or {}
    if adjustments.get("cluster") or int(adjustments.get("comparisons") or 1) != 1:
        raise QuestionError("adjustments", "estimation takes no cluster block and one comparison")
    for name in ("interim", "assurance"):
        if q.get(name):
            raise QuestionError(name, "is not offered when hypothesis.aim is estimation")
    confidence = hyp.get("confidence")
    if not isinstance(confidence, (int, float)) or not 0.5 < confidence < 1:
        raise QuestionError("hypothesis.confidence", f"must be in (0.5, 1); got {confidence!r}")
    assurance = hyp.get("assurance")
    if assurance is not None:
        if not design.estimation.assurance:
            raise QuestionError(
                "hypothesis.assurance", f"is not offered for {design.cell}; got {assurance!r}"
            )
        if not 0.5 < assurance < 1:
            raise QuestionError("hypothesis.assurance", f"must be in (0.5, 1); got {assurance!r}")
    half_width = hyp.get("half_width")
    if q["find"] == "sample_size" and not (isinstance(half_width, (int, float)) and half_width > 0):
        raise QuestionError("hypothesis.half_width", f"must be > 0; got {half_width!r}")
    analysis_of(q, design, "analytic")
    blocks = {b: q.get(b) or {} for b in ("effect", "assumptions", "analysis_options")}
    raise_first(estimation_validate(design, blocks))
