"""The effect a posted simulation data model implies, and its check against posted effect fields.

A simulated question that posts ``simulation.data`` simulates those arms, not the effect fields:
the record and the report must state the effect the arms imply. ``derive`` returns it per design
(means and SDs from the arms' moments, P(Y > X) by numerical integration, the hazard ratio of
proportional-hazards arms); ``reconcile`` puts it into the question, refusing posted effect
fields that disagree with it beyond ``TOLERANCE``.
"""

from __future__ import annotations

import math

from scipy import integrate, stats

from . import models
from .errors import QuestionError

# Posted and implied values agree when they differ by at most 1% of the larger magnitude (for a
# difference of means: of the larger of the two differences and the implied SD, so a rounded
# small difference is judged on the data's scale). Common practice, no source: it admits values
# rounded to about three significant digits and refuses a different assumption.
TOLERANCE = 0.01

_TWO_ARM = ("two_means", "two_proportions", "rank_sum", "survival_logrank")


def _arms(data: dict, design: str) -> list[dict]:
    if design in _TWO_ARM:
        keys = ["control", "treatment"]
        return [models.check_arm(data.get(k), f"simulation.data.{k}") for k in keys]
    if design in ("one_mean", "paired_mean"):
        return [models.check_arm(data.get("sample"), "simulation.data.sample")]
    if design == "anova_oneway":
        return [
            models.check_arm(a, f"simulation.data.groups.{i}")
            for i, a in enumerate(data.get("groups") or [])
        ]
    return []


def _sd(var: float | None) -> float | None:
    return None if var is None else math.sqrt(var)


# --- P(Y > X) + P(Y = X)/2 between two arms, by quadrature (deterministic) --------------------


def _components(arm: dict) -> list[tuple[float, object, float]]:
    """Return the arm as a mixture [(weight, frozen scipy distribution, shift)]."""
    f, s = arm["family"], arm.get("shift", 0.0)
    if f == "contaminated_normal":
        c = arm["contamination"]
        parts = [
            (1 - c, stats.norm(arm["mean"], arm["sd"])),
            (c, stats.norm(arm["mean"], arm["sd"] * arm["sd_factor"])),
        ]
        return [(w, d, s) for w, d in parts if w > 0]
    dist = {
        "normal": lambda: stats.norm(arm["mean"], arm["sd"]),
        "lognormal": lambda: stats.lognorm(arm["sigma"], scale=math.exp(arm["mu"])),
        "gamma": lambda: stats.gamma(arm["shape"], scale=arm["scale"]),
        "student_t": lambda: stats.t(arm["df"], arm["loc"], arm["scale"]),
        "uniform": lambda: stats.uniform(arm["low"], arm["high"] - arm["low"]),
        "exponential": lambda: stats.expon(scale=arm["scale"]),
        "cauchy": lambda: stats.cauchy(arm["loc"], arm["scale"]),
        "weibull": lambda: stats.weibull_min(arm["shape"], scale=arm["scale"]),
        "bernoulli": lambda: stats.bernoulli(arm["p"]),
        "poisson": lambda: stats.poisson(arm["mean"]),
        "negative_binomial": lambda: stats.nbinom(
            arm["dispersion"], arm["dispersion"] / (arm["dispersion"] + arm["mean"])
        ),
    }[f]()
    return [(1.0, dist, s)]


def _discrete(dist) -> bool:
    return isinstance(dist.dist, stats.rv_discrete)


def _above_continuous(y, sy: float, x, sx: float) -> float:
    """P(Y > X) for a continuous Y: the integral over u of F_X(Q_Y(u)) (ties have probability 0)."""
    value, _ = integrate.quad(
        lambda u: float(x.cdf(y.ppf(u) + sy - sx)), 0.0, 1.0, limit=400, epsabs=1e-11
    )
    return value


def _pair(y, sy: float, x, sx: float) -> float:
    """P(Y > X) + P(Y = X)/2 for independent components Y and X."""
    if not _discrete(y):
        return _above_continuous(y, sy, x, sx)
    if not _discrete(x):
        return 1.0 - _above_continuous(x, sx, y, sy)
    # Both on the integers (bernoulli, poisson, negative binomial; shifts are whole here).
    lo, hi = int(y.ppf(1e-16)), int(y.isf(1e-16)) + 1
    total = 0.0
    for k in range(lo, hi + 1):
        p = float(y.pmf(k))
        if p:
            kx = k + sy - sx
            total += p * (float(x.cdf(kx - 1)) + 0.5 * float(x.pmf(kx)))
    return total


def prob_superiority(control: dict, treatment: dict) -> float:
    """Return P(Y > X) + P(Y = X)/2, Y treatment and X control, by deterministic quadrature."""
    total = 0.0
    for wy, y, sy in _components(treatment):
        for wx, x, sx in _components(control):
            total += wy * wx * _pair(y, sy, x, sx)
    return min(max(total, 0.0), 1.0)


# --- the implied effect per design ------------------------------------------------------------


def derive(q: dict) -> dict | None:
    """Return ``{"fields": {...}, "missing": [...], "note": str}`` implied by the posted data model.

    ``fields`` maps effect field names to the values the arms imply; ``missing`` names effect
    fields the data model cannot imply (e.g. the SD of a Cauchy arm) and ``note`` says why.
    None when no data model is posted.
    """
    sim = q.get("simulation") or {}
    data = sim.get("data")
    design = q.get("design")
    if data is None or not isinstance(data, dict) or design == "correlation":
        return None
    arms = _arms(data, design)
    if not arms:
        return None
    mv = [models.moments(a) for a in arms]
    fields: dict = {}
    missing: list[str] = []
    notes: list[str] = []
    if design == "two_means":
        (m1, v1), (m2, v2) = mv
        if m1 is not None and m2 is not None:
            fields["difference"] = m2 - m1
        else:
            missing.append("difference")
        for name, v in (("sd_control", v1), ("sd_treatment", v2)):
            if v is not None:
                fields[name] = _sd(v)
            else:
                missing.append(name)
    elif design in ("one_mean", "paired_mean"):
        m, v = mv[0]
        sd_name = "sd" if design == "one_mean" else "sd_difference"
        if m is not None:
            fields["difference"] = m
        else:
            missing.append("difference")
        if v is not None:
            fields[sd_name] = _sd(v)
        else:
            missing.append(sd_name)
    elif design == "two_proportions":
        if all(a["family"] == "bernoulli" for a in arms):
            fields["p_control"], fields["p_treatment"] = arms[0]["p"], arms[1]["p"]
    elif design == "rank_sum":
        fields["prob_superiority"] = prob_superiority(arms[0], arms[1])
    elif design == "anova_oneway":
        if all(m is not None and v is not None for m, v in mv):
            means = [m for m, _ in mv]
            within = sum(v for _, v in mv) / len(mv)
            grand = sum(means) / len(means)
            spread = math.sqrt(sum((m - grand) ** 2 for m in means) / len(means))
            fields["group_means"] = means
            fields["sd"] = math.sqrt(within)
            fields["cohens_f"] = spread / math.sqrt(within)
            fields["groups"] = len(means)
            if len({round(v, 12) for _, v in mv}) > 1:
                notes.append(
                    "the groups' variances differ; sd is the root mean within-group variance"
                )
        else:
            missing += ["group_means", "sd", "cohens_f"]
    elif design == "survival_logrank":
        hr, lam = _hazards(arms)
        if hr is not None:
            fields["hazard_ratio"] = hr
            if lam is not None:
                fields["hazard_control"] = lam
        else:
            missing += ["hazard_ratio", "hazard_control"]
            notes.append(
                "the event-time arms do not have proportional hazards, so no single hazard "
                "ratio describes them"
            )
    if missing and design != "survival_logrank":
        notes.append(
            "the data model has no finite "
            + " or ".join(sorted({"mean" if "difference" in n else "SD" for n in missing}))
            + " for "
            + ", ".join(missing)
            + "; the arms are described by "
            + "; ".join(_location_scale(a) for a in arms)
        )
    return {"fields": fields, "missing": missing, "note": "; ".join(notes)}


def _hazards(arms: list[dict]) -> tuple[float | None, float | None]:
    """Return (hazard ratio, control hazard) of proportional-hazards arms, else (None, None)."""
    a, b = arms
    if a.get("shift") or b.get("shift"):
        return None, None
    if a["family"] == b["family"] == "exponential":
        return a["scale"] / b["scale"], 1.0 / a["scale"]
    if a["family"] == b["family"] == "weibull" and a["shape"] == b["shape"]:
        k = a["shape"]
        hr = (a["scale"] / b["scale"]) ** k
        return hr, (None if k != 1 else 1.0 / a["scale"])
    return None, None


def _location_scale(arm: dict) -> str:
    params = ", ".join(f"{k} {arm[k]:g}" for k in models.FAMILIES[arm["family"]])
    return f"{arm['family']} ({params})"


def _tolerance(name: str, posted: float, implied: float, fields: dict) -> float:
    scale = max(abs(posted), abs(implied))
    if name == "difference":
        sds = [v for k, v in fields.items() if k.startswith("sd") and v is not None]
        scale = max([scale, *sds])
    return TOLERANCE * scale


def reconcile(q: dict) -> dict | None:
    """Put the data model's implied effect into ``q["effect"]``; return what was derived.

    Refuses (QuestionError naming ``effect.<field>``) a posted effect field that disagrees with
    the implied value beyond the tolerance, showing both values. Returns None without a data
    model; else the record's ``method.implied_effect`` block.
    """
    implied = derive(q)
    if implied is None:
        return None
    effect = dict(q.get("effect") or {})
    fields = implied["fields"]
    posted = {}
    for name, value in fields.items():
        have = effect.get(name)
        if have is None or isinstance(value, list):
            continue
        posted[name] = have
        if abs(float(have) - value) > _tolerance(name, float(have), value, fields):
            raise QuestionError(
                f"effect.{name}",
                f"is {have:g} but the posted data model (simulation.data) implies {value:.6g}; "
                f"they must agree within {TOLERANCE:.0%} — remove effect.{name} (the data model's "
                "value is used) or correct one of them",
            )
    if "group_means" in fields and effect.get("group_means") is not None:
        for i, (have, value) in enumerate(
            zip(effect["group_means"], fields["group_means"], strict=False)
        ):
            if abs(have - value) > TOLERANCE * max(abs(have), abs(value), fields["sd"]):
                raise QuestionError(
                    f"effect.group_means.{i}",
                    f"is {have:g} but the posted data model (simulation.data.groups.{i}) implies "
                    f"a mean of {value:.6g}; they must agree within {TOLERANCE:.0%}",
                )
    effect.update(fields)
    if "hazard_control" in fields and effect.get("median_control") is not None:
        effect["median_control"] = math.log(2.0) / fields["hazard_control"]
    not_simulated = {k: effect[k] for k in implied["missing"] if effect.get(k) is not None}
    q["effect"] = effect
    block = {
        "source": "simulation.data",
        "fields": sorted(fields),
        "tolerance": TOLERANCE,
    }
    if posted:
        block["posted"] = posted
    if implied["missing"]:
        block["not_implied"] = implied["missing"]
    if not_simulated:
        block["posted_not_checked"] = not_simulated
    if implied["note"]:
        block["note"] = implied["note"]
    return block


def warnings(block: dict) -> list[str]:
    """Plain-language warnings for effect fields the data model could not imply."""
    out = []
    unchecked = block.get("posted_not_checked") or {}
    if unchecked:
        shown = ", ".join(f"effect.{k} = {v:g}" for k, v in unchecked.items())
        out.append(
            f"{shown} could not be checked against the data model and were not simulated "
            f"({block.get('note', 'the data model does not imply them')}); they are kept as "
            "posted for reference only"
        )
    return out
