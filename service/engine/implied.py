"""The effect a posted simulation data model implies, and its check against posted effect fields.

A simulated question that posts ``simulation.data`` simulates those groups, not the effect fields:
the record and the report must state the effect the groups imply. Each cell's simulation model
says what its groups imply (``implied_fields``: means and SDs from moments, P(Y > X) by numerical
integration, the hazard ratio of proportional-hazards groups); ``reconcile`` puts it into the
question, refusing posted fields that disagree with it beyond ``TOLERANCE``.
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


def posted_models(data: dict, design) -> tuple[list[dict], list[str]]:
    """Return the posted data models of ``simulation.data`` in question order, with their labels.

    The cell's ``data_keys`` say the shape: named groups ("control", "treatment"; "group";
    "differences") or ("groups",), a list of at least two groups.
    """
    keys = design.simulation.data_keys if design.simulation else ()
    if not keys:
        raise QuestionError(
            "simulation.data",
            f"{design.cell} simulates from its effect and assumptions; a posted data model is "
            "not accepted",
        )
    if not isinstance(data, dict):
        raise QuestionError("simulation.data", f"must be an object; got {data!r}")
    if keys == ("groups",):
        groups = data.get("groups")
        if set(data) != {"groups"} or not isinstance(groups, list) or len(groups) < 2:
            raise QuestionError(
                "simulation.data.groups", "must be the only key, a list of at least 2 groups"
            )
        labels = [f"groups.{i}" for i in range(len(groups))]
        return [
            models.check_arm(a, f"simulation.data.{lab}")
            for a, lab in zip(groups, labels, strict=True)
        ], labels
    if set(data) != set(keys):
        raise QuestionError(
            "simulation.data",
            f"must have exactly the keys {', '.join(keys)}; got {', '.join(sorted(data))}",
        )
    return [models.check_arm(data[k], f"simulation.data.{k}") for k in keys], list(keys)


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


# --- the implied effect per cell ---------------------------------------------------------------


def derive(q: dict, design) -> dict | None:
    """Return ``{"fields": {...}, "missing": [...], "note": str, "replaces": {...}}`` implied by
    the posted data model; None when none is posted (or the cell takes none).

    ``fields`` maps the cell's field names to the values the groups imply; ``missing`` names
    fields the data model cannot imply (e.g. the SD of a Cauchy group) and ``note`` says why;
    ``replaces`` maps a posted field to the implied fields it is checked against and then gives
    way to (a common sd against two unequal group SDs).
    """
    sim = q.get("simulation") or {}
    data = sim.get("data")
    model = design.simulation
    if data is None or not isinstance(data, dict) or model is None:
        return None
    if not model.data_keys or model.implied_fields is None:
        return None
    arms, _ = posted_models(data, design)
    got = model.implied_fields(q, arms)
    fields = dict(got.get("fields") or {})
    missing = list(got.get("missing") or [])
    notes = [got["note"]] if got.get("note") else []
    if missing and not got.get("note"):
        notes.append(
            "the data model has no finite "
            + " or ".join(sorted({"SD" if n.startswith("sd") else "mean" for n in missing}))
            + " for "
            + ", ".join(missing)
            + "; the groups are described by "
            + "; ".join(_location_scale(a) for a in arms)
        )
    return {
        "fields": fields,
        "missing": missing,
        "note": "; ".join(notes),
        "replaces": dict(got.get("replaces") or {}),
    }


def _location_scale(arm: dict) -> str:
    params = ", ".join(f"{k} {arm[k]:g}" for k in models.FAMILIES[arm["family"]])
    return f"{arm['family']} ({params})"


def _tolerance(name: str, posted: float, implied: float, fields: dict) -> float:
    scale = max(abs(posted), abs(implied))
    if name == "difference":
        sds = [v for k, v in fields.items() if k.startswith("sd") and v is not None]
        scale = max([scale, *sds])
    return TOLERANCE * scale


def _check(path: str, have: float, value: float, name: str, fields: dict) -> None:
    if abs(float(have) - value) > _tolerance(name, float(have), value, fields):
        raise QuestionError(
            path,
            f"is {have:g} but the posted data model (simulation.data) implies {value:.6g}; "
            f"they must agree within {TOLERANCE:.0%} — remove {path} (the data model's "
            "value is used) or correct one of them",
        )


def reconcile(q: dict, design) -> dict | None:
    """Put the data model's implied values into the question's blocks; return what was derived.

    Refuses (QuestionError naming the field path) a posted field that disagrees with the
    implied value beyond the tolerance, showing both values. Returns None without a data
    model; else the record's ``method.implied_effect`` block.
    """
    implied = derive(q, design)
    if implied is None:
        return None
    fields = implied["fields"]
    blocks = {b: dict(q.get(b) or {}) for b in ("effect", "assumptions")}
    block_of = {f.name: f.block for f in design.fields}
    posted = {}
    for name, value in fields.items():
        have = blocks[block_of[name]].get(name)
        if have is None:
            continue
        if isinstance(value, list):
            for i, (h, v) in enumerate(zip(have, value, strict=False)):
                if abs(h - v) > TOLERANCE * max(abs(h), abs(v), fields.get("sd") or 0.0):
                    raise QuestionError(
                        f"{block_of[name]}.{name}.{i}",
                        f"is {h:g} but the posted data model (simulation.data.groups.{i}) "
                        f"implies a mean of {v:.6g}; they must agree within {TOLERANCE:.0%}",
                    )
            continue
        posted[name] = have
        _check(f"{block_of[name]}.{name}", have, value, name, fields)
    for name, against in implied["replaces"].items():
        have = blocks[block_of[name]].get(name)
        if have is None:
            continue
        for other in against:
            _check(f"{block_of[name]}.{name}", have, fields[other], other, fields)
        posted[name] = have
        del blocks[block_of[name]][name]
    for name, value in fields.items():
        blocks[block_of[name]][name] = value
    not_simulated = {}
    for k in implied["missing"]:
        have = blocks[block_of[k]].get(k)
        if have is not None:
            not_simulated[f"{block_of[k]}.{k}"] = have
    q.update(blocks)
    block = {
        "source": "simulation.data",
        "fields": sorted(f"{block_of[k]}.{k}" for k in fields),
        "tolerance": TOLERANCE,
    }
    if posted:
        block["posted"] = {f"{block_of[k]}.{k}": v for k, v in posted.items()}
    if implied["missing"]:
        block["not_implied"] = [f"{block_of[k]}.{k}" for k in implied["missing"]]
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
        shown = ", ".join(f"{k} = {v:g}" for k, v in unchecked.items())
        out.append(
            f"{shown} could not be checked against the data model and were not simulated "
            f"({block.get('note', 'the data model does not imply them')}); they are kept as "
            "posted for reference only"
        )
    return out
