"""Data models for simulation: one distribution per group, validated, with moments and a sampler.

A group's data model is a plain dict ``{"family": name, ...parameters}`` (DEVELOPERS.md lists the families).
The engine adds one private parameter, ``shift``, a constant added to every draw; it is how the
null model moves an arm onto the control's mean without changing the arm's shape.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from .errors import QuestionError

# family -> parameters in the order the sampler reads them.
FAMILIES: dict[str, tuple[str, ...]] = {
    "normal": ("mean", "sd"),
    "lognormal": ("mu", "sigma"),
    "gamma": ("shape", "scale"),
    "student_t": ("df", "loc", "scale"),
    "contaminated_normal": ("mean", "sd", "contamination", "sd_factor"),
    "uniform": ("low", "high"),
    "exponential": ("scale",),
    "cauchy": ("loc", "scale"),
    "bernoulli": ("p",),
    "poisson": ("mean",),
    "negative_binomial": ("mean", "dispersion"),
    "weibull": ("shape", "scale"),
}

# Families whose draws are always > 0: the only ones allowed as event-time distributions.
POSITIVE = frozenset({"lognormal", "gamma", "exponential", "weibull"})

_POSITIVE_PARAMS = {"sd", "sigma", "shape", "scale", "df", "sd_factor", "dispersion"}


def _number(value, field: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise QuestionError(field, f"must be a number; got {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise QuestionError(field, f"must be finite; got {value!r}")
    return value


def check_arm(arm: dict, field: str) -> dict:
    """Return a validated copy of ``arm`` (floats), or raise QuestionError naming the bad field."""
    if not isinstance(arm, dict):
        raise QuestionError(field, f"must be an object with a 'family'; got {arm!r}")
    family = arm.get("family")
    if family not in FAMILIES:
        raise QuestionError(
            f"{field}.family", f"unknown family {family!r}; allowed: {', '.join(FAMILIES)}"
        )
    names = FAMILIES[family]
    extra = sorted(set(arm) - set(names) - {"family", "shift"})
    if extra:
        raise QuestionError(
            f"{field}.{extra[0]}",
            f"is not a parameter of {family}; {family} takes {', '.join(names)}",
        )
    out: dict = {"family": family}
    for name in names:
        if name not in arm:
            raise QuestionError(f"{field}.{name}", f"is required for the {family} family")
        value = _number(arm[name], f"{field}.{name}")
        if name in _POSITIVE_PARAMS and value <= 0:
            raise QuestionError(f"{field}.{name}", f"must be > 0; got {value:g}")
        out[name] = value
    if "shift" in arm:
        out["shift"] = _number(arm["shift"], f"{field}.shift")
    _check_family(out, field)
    return out


def _check_family(arm: dict, field: str) -> None:
    family = arm["family"]
    if family == "contaminated_normal" and not 0 <= arm["contamination"] <= 1:
        raise QuestionError(
            f"{field}.contamination", f"must be in [0, 1]; got {arm['contamination']:g}"
        )
    if family == "uniform" and not arm["low"] < arm["high"]:
        raise QuestionError(
            f"{field}.high", f"must be greater than low ({arm['low']:g}); got {arm['high']:g}"
        )
    if family == "bernoulli" and not 0 <= arm["p"] <= 1:
        raise QuestionError(f"{field}.p", f"must be in [0, 1]; got {arm['p']:g}")
    if family in ("poisson", "negative_binomial") and arm["mean"] <= 0:
        raise QuestionError(f"{field}.mean", f"must be > 0; got {arm['mean']:g}")


def moments(arm: dict) -> tuple[float | None, float | None]:
    """Return the arm's (mean, variance); None where the moment does not exist (e.g. Cauchy)."""
    f, shift = arm["family"], arm.get("shift", 0.0)
    if f == "normal":
        m, v = arm["mean"], arm["sd"] ** 2
    elif f == "lognormal":
        s2 = arm["sigma"] ** 2
        m = math.exp(arm["mu"] + s2 / 2)
        v = math.expm1(s2) * math.exp(2 * arm["mu"] + s2)
    elif f == "gamma":
        m, v = arm["shape"] * arm["scale"], arm["shape"] * arm["scale"] ** 2
    elif f == "student_t":
        df = arm["df"]
        m = arm["loc"] if df > 1 else None
        v = arm["scale"] ** 2 * df / (df - 2) if df > 2 else None
    elif f == "contaminated_normal":
        c, k = arm["contamination"], arm["sd_factor"]
        m, v = arm["mean"], arm["sd"] ** 2 * (1 - c + c * k * k)
    elif f == "uniform":
        m, v = (arm["low"] + arm["high"]) / 2, (arm["high"] - arm["low"]) ** 2 / 12
    elif f == "exponential":
        m, v = arm["scale"], arm["scale"] ** 2
    elif f == "cauchy":
        m, v = None, None
    elif f == "bernoulli":
        m, v = arm["p"], arm["p"] * (1 - arm["p"])
    elif f == "poisson":
        m, v = arm["mean"], arm["mean"]
    elif f == "negative_binomial":
        m = arm["mean"]
        v = m + m * m / arm["dispersion"]
    elif f == "weibull":
        k, s = arm["shape"], arm["scale"]
        g1, g2 = special.gamma(1 + 1 / k), special.gamma(1 + 2 / k)
        m, v = s * g1, s * s * (g2 - g1 * g1)
    else:  # pragma: no cover - check_arm rejects unknown families first
        raise ValueError(f)
    return (None if m is None else m + shift), v


def center(arm: dict) -> float:
    """Return the arm's mean, or its location when the mean does not exist (Cauchy, t with df ≤ 1)."""
    m, _ = moments(arm)
    if m is not None:
        return m
    return arm["loc"] + arm.get("shift", 0.0)


def shifted(arm: dict, by: float) -> dict:
    """Return a copy of ``arm`` whose draws are moved by ``by`` (shape unchanged)."""
    out = dict(arm)
    total = out.get("shift", 0.0) + by
    if total == 0.0:
        out.pop("shift", None)
    else:
        out["shift"] = total
    return out


def variates(arm: dict) -> int:
    """Return how many independent random streams one draw of the arm consumes."""
    return 2 if arm["family"] == "contaminated_normal" else 1


def sample(arm: dict, gens: list[np.random.Generator], size: tuple[int, ...]) -> np.ndarray:
    """Draw float64 values of ``arm`` of the given shape; ``gens`` holds one generator per variate.

    Every family consumes its generator element by element in C order, so drawing rows in
    sub-batches from the same generator yields the same numbers as drawing them at once.
    """
    f, g = arm["family"], gens[0]
    if f == "normal":
        x = g.standard_normal(size)
        x *= arm["sd"]
        x += arm["mean"]
    elif f == "lognormal":
        x = g.standard_normal(size)
        x *= arm["sigma"]
        x += arm["mu"]
        np.exp(x, out=x)
    elif f == "gamma":
        x = g.standard_gamma(arm["shape"], size)
        x *= arm["scale"]
    elif f == "student_t":
        x = g.standard_t(arm["df"], size)
        x *= arm["scale"]
        x += arm["loc"]
    elif f == "contaminated_normal":
        x = g.standard_normal(size)
        wide = gens[1].random(size) < arm["contamination"]
        x *= np.where(wide, arm["sd"] * arm["sd_factor"], arm["sd"])
        x += arm["mean"]
    elif f == "uniform":
        x = g.random(size)
        x *= arm["high"] - arm["low"]
        x += arm["low"]
    elif f == "exponential":
        x = g.standard_exponential(size)
        x *= arm["scale"]
    elif f == "cauchy":
        x = g.standard_cauchy(size)
        x *= arm["scale"]
        x += arm["loc"]
    elif f == "bernoulli":
        x = (g.random(size) < arm["p"]).astype(np.float64)
    elif f == "poisson":
        x = g.poisson(arm["mean"], size).astype(np.float64)
    elif f == "negative_binomial":
        k = arm["dispersion"]
        x = g.negative_binomial(k, k / (k + arm["mean"]), size).astype(np.float64)
    elif f == "weibull":
        x = g.weibull(arm["shape"], size)
        x *= arm["scale"]
    else:  # pragma: no cover
        raise ValueError(f)
    shift = arm.get("shift")
    if shift:
        x += shift
    return x


def public(arm: dict) -> dict:
    """Return the arm as shown in a record: its family and parameters, the shift spelled out."""
    return {k: arm[k] for k in ("family", *FAMILIES[arm["family"]], "shift") if k in arm}
