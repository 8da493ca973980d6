"""Assurance: the power averaged over a prior on the effect (O'Hagan, Stevens & Campbell 2005).

Power answers "if the effect is exactly the assumed one"; assurance answers "given what we
believe about the effect": ∫ P(success | x) π(x) dx, with π a normal, or a normal truncated to
[lower, upper], on the cell's effect field (its ``solved`` field, on the scale it is entered).
Success is a significant result in the beneficial direction (the one the assumed effect
points to), so assurance can never exceed the prior probability that the effect is beneficial;
for an x on the harmful side it is counted as 0 (the far tail of a two-sided test, at most
alpha / 2, is left out: the assurance is conservative by at most that much on that side).

For any cell with an analytic power (``design.power``). Pure: numpy/scipy/stdlib.
"""

from __future__ import annotations

import copy
import math

from scipy import integrate, special

from .designs.base import Field
from .errors import QuestionError

# The question's ``assurance`` block, declared once: the schema, the JSON Schema and the
# catalogue read these.
FIELDS = (
    Field(
        "mean",
        "assurance",
        "number",
        "Mean of the normal prior on the effect, on the scale of the cell's effect field.",
        "prior mean of the effect",
    ),
    Field(
        "sd",
        "assurance",
        "number",
        "Standard deviation of the normal prior on the effect.",
        "prior standard deviation of the effect",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "lower",
        "assurance",
        "number",
        "Lower truncation point of the prior (absent: not truncated below).",
        "lower end of the prior",
    ),
    Field(
        "upper",
        "assurance",
        "number",
        "Upper truncation point of the prior (absent: not truncated above).",
        "upper end of the prior",
    ),
    Field(
        "target",
        "assurance",
        "number",
        "Assurance to reach: also solve for the size that reaches it (find = sample_size).",
        "target assurance",
        minimum=0,
        maximum=1,
        exclusive_minimum=True,
        exclusive_maximum=True,
    ),
)


def _prior(block: dict) -> tuple[float, float, float, float, float]:
    """(mean, sd, lower, upper, mass) of the prior, checked."""
    mean, sd = block.get("mean"), block.get("sd")
    if not isinstance(mean, (int, float)) or not math.isfinite(mean):
        raise QuestionError("assurance.mean", "is required: the prior mean of the effect")
    if not isinstance(sd, (int, float)) or not sd > 0:
        raise QuestionError("assurance.sd", f"is required and must be greater than 0; got {sd}")
    lo = -math.inf if block.get("lower") is None else float(block["lower"])
    hi = math.inf if block.get("upper") is None else float(block["upper"])
    if not lo < hi:
        raise QuestionError("assurance.upper", f"must be greater than lower; got {hi:g} ≤ {lo:g}")
    mass = special.ndtr((hi - mean) / sd) - special.ndtr((lo - mean) / sd)
    if not mass > 1e-12:
        raise QuestionError("assurance.lower", "the truncated prior holds no probability")
    return float(mean), float(sd), lo, hi, float(mass)


def _at(q: dict, design, x: float) -> dict:
    out = copy.deepcopy(q)
    block = design.field(design.solved).block
    out[block] = {**(out.get(block) or {}), design.solved: x}
    return out


def _beneficial(q: dict, design) -> tuple[float, int]:
    """(null value, +1/−1): where the effect field is beneficial, from the assumed effect."""
    null = design.null_effect(q)
    value = (q.get(design.field(design.solved).block) or {}).get(design.solved)
    if null is None or value is None or value == null:
        raise QuestionError(
            "assurance",
            f"needs an assumed {design.solved} off its null value to know which side is beneficial",
        )
    return float(null), (1 if value > null else -1)


def ceiling(block: dict, null: float, side: int) -> float:
    """The prior probability of a beneficial effect: the most assurance can reach."""
    mean, sd, lo, hi, mass = _prior(block)
    a, b = (max(lo, null), hi) if side > 0 else (lo, min(hi, null))
    if not a < b:
        return 0.0
    return float((special.ndtr((b - mean) / sd) - special.ndtr((a - mean) / sd)) / mass)


def assurance(q: dict, design, per_group: list[float], alpha: float) -> float:
    """∫ power(x) π(x) dx over the beneficial side of the (truncated) normal prior."""
    block = q["assurance"]
    mean, sd, lo, hi, mass = _prior(block)
    null, side = _beneficial(q, design)
    a, b = (max(lo, null), hi) if side > 0 else (lo, min(hi, null))
    a, b = max(a, mean - 12 * sd), min(b, mean + 12 * sd)  # beyond ±12 SD the prior is 0
    if not a < b:
        return 0.0

    def f(x: float) -> float:
        dens = math.exp(-0.5 * ((x - mean) / sd) ** 2) / (sd * math.sqrt(2 * math.pi))
        if x == null:
            return 0.0
        return design.power(_at(q, design, x), per_group, alpha) * dens

    points = [x for x in (mean, null) if a < x < b] or None
    value, _ = integrate.quad(f, a, b, points=points, epsabs=1e-10, epsrel=1e-8, limit=200)
    return float(value / mass)


def check(q: dict, design) -> None:
    """Refuse an assurance block the question cannot honor, naming the field."""
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if q.get("find") == "effect":
        raise QuestionError("assurance", "needs an assumed effect: use find sample_size or power")
    if aim != "superiority":
        raise QuestionError("assurance", f"is answered for superiority questions; got {aim}")
    if q.get("method") == "simulation":
        raise QuestionError("assurance", "is computed from the analytic power; use method analytic")
    if (q.get("adjustments") or {}).get("cluster"):
        raise QuestionError("assurance", "is not offered for cluster-randomized questions")
    _prior(q["assurance"])
    _beneficial(q, design)


def block(q: dict, design, per_group: list[float], alpha: float, power: float) -> dict:
    """The record's ``assurance`` block at the analyzed size (and the size reaching a target)."""
    check(q, design)
    prior = q["assurance"]
    null, side = _beneficial(q, design)
    top = ceiling(prior, null, side)
    out = {
        "estimate": assurance(q, design, per_group, alpha),
        "power": power,
        "ceiling": top,
        "prior": {k: prior.get(k) for k in ("mean", "sd", "lower", "upper")},
        "field": design.solved,
        "reference": "O'Hagan, Stevens & Campbell (2005), Pharm Stat 4:187",
    }
    target = prior.get("target")
    if target is not None:
        out["target"] = target
        out["target_per_group"] = solve_n(q, design, per_group, alpha, float(target), top)
    return out


def solve_n(
    q: dict, design, per_group: list[float], alpha: float, target: float, top: float
) -> list[int] | None:
    """The smallest whole sizes (in the allocation) whose assurance reaches ``target``; None
    when it is unreachable (assurance stays below the prior probability of benefit)."""
    if target >= top - 1e-9:
        return None
    weights = [n / per_group[0] for n in per_group]

    def at(n1: int) -> float:
        return assurance(q, design, [n1 * w for w in weights], alpha)

    lo, hi = 2, max(2, int(per_group[0]))
    while at(hi) < target:
        lo, hi = hi, hi * 2
        if hi > 10**8:
            return None
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if at(mid) >= target:
            hi = mid
        else:
            lo = mid
    n1 = lo if at(lo) >= target else hi
    return [int(math.ceil(n1 * w - 1e-9)) for w in weights]
