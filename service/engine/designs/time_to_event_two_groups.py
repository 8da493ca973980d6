"""Time to event, two groups: the log-rank test, events by Schoenfeld or Freedman, subjects from
the exponential P(event) with uniform accrual, further follow-up and exponential loss.

Beyond that closed form (survival_profile.py, by numerical integration): piecewise-constant
control hazards, accrual at piecewise rates, a loss hazard per group, a delayed treatment effect
(the log-rank power then by the continuous-time form of Lakatos 1988) and non-inferiority on the
hazard ratio against a margin (Schoenfeld's events with ln HR − ln margin). Every sample-size
answer also gives the calendar time the expected events reach the required number."""

from __future__ import annotations

import math

from scipy import special

from .. import direction, models
from ..errors import QuestionError
from ..quantiles import normal_power, power_unreachable, root, z_alpha, z_sum
from . import survival_profile
from .base import (
    Analysis,
    DecisionRule,
    Design,
    EffectAxis,
    Field,
    Phrases,
    SimulationModel,
    Solution,
)
from .common import (
    analysis_of,
    analytic_method,
    check_aim,
    fmt,
    make_validate,
    number,
    tails,
    two_group_allocation,
    two_groups,
    values,
)

_EPS = 1e-9
TIME_UNITS = ("days", "weeks", "months", "years")
FIELDS = (
    Field(
        "hazard_ratio",
        "effect",
        "number",
        "Hazard ratio of the event, treatment over control.",
        "hazard ratio",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "time_unit",
        "assumptions",
        "choice",
        "Unit of every time and rate in the question.",
        "time unit",
        choices=TIME_UNITS,
    ),
    Field(
        "control_median",
        "assumptions",
        "number",
        "Median time to the event in the control group.",
        "median time to the event in the control group",
        unit="time units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "control_hazard",
        "assumptions",
        "number",
        "Constant hazard of the event in the control group, events per person per time unit.",
        "hazard of the event in the control group",
        unit="per time unit",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "accrual",
        "assumptions",
        "number",
        "Length of the uniform accrual period.",
        "accrual period",
        unit="time units",
        minimum=0,
    ),
    Field(
        "follow_up",
        "assumptions",
        "number",
        "Further follow-up after accrual ends.",
        "follow-up after accrual",
        unit="time units",
        minimum=0,
    ),
    Field(
        "loss_hazard",
        "assumptions",
        "number",
        "Constant hazard of loss to follow-up, per person per time unit.",
        "hazard of loss to follow-up",
        unit="per time unit",
        minimum=0,
        default=0.0,
    ),
    Field(
        "loss_hazard_treatment",
        "assumptions",
        "number",
        "Hazard of loss to follow-up in the treatment group when it differs from the control "
        "group's loss_hazard, per person per time unit.",
        "hazard of loss to follow-up in the treatment group",
        unit="per time unit",
        minimum=0,
    ),
    Field(
        "control_hazards",
        "assumptions",
        "number_list",
        "Piecewise-constant hazard of the event in the control group, one per piece of time "
        "between the cut points, events per person per time unit.",
        "piecewise hazards of the event in the control group",
        unit="per time unit",
        minimum=0,
        exclusive_minimum=True,
        min_items=1,
    ),
    Field(
        "cut_points",
        "assumptions",
        "number_list",
        "Times since entry, increasing, where the piecewise control hazard changes.",
        "cut points of the piecewise hazards",
        unit="time units",
        minimum=0,
        exclusive_minimum=True,
        min_items=1,
    ),
    Field(
        "treatment_lag",
        "assumptions",
        "number",
        "Time since entry before the treatment starts to act: the hazard ratio is 1 until then "
        "(a delayed treatment effect).",
        "delay before the treatment effect starts",
        unit="time units",
        minimum=0,
    ),
    Field(
        "accrual_rates",
        "assumptions",
        "number_list",
        "Relative accrual rates over equal consecutive parts of the accrual period, e.g. "
        "[1, 2, 3] for a ramp; uniform accrual when absent.",
        "relative accrual rates",
        minimum=0,
        exclusive_minimum=True,
        min_items=1,
    ),
    Field(
        "events_formula",
        "analysis_options",
        "choice",
        "Approximation for the number of events the log-rank test needs.",
        "events formula",
        choices=("schoenfeld", "freedman"),
        default="schoenfeld",
    ),
)
FORMS = (
    ("time_unit", "control_median", "accrual", "follow_up"),
    ("time_unit", "control_hazard", "accrual", "follow_up"),
    ("time_unit", "control_hazards", "accrual", "follow_up"),
)
# Fields that leave the exponential closed form for the numerical profile.
PROFILE_FIELDS = (
    "control_hazards",
    "cut_points",
    "treatment_lag",
    "accrual_rates",
    "loss_hazard_treatment",
)
ANALYSES = (
    Analysis(
        "logrank",
        "log-rank test",
        ("analytic", "simulation"),
        ("superiority", "noninferiority"),
        "Schoenfeld 1983 or Freedman 1982; Lachin & Foulkes 1986; Lakatos 1988 for a delayed "
        "effect",
    ),
)


def _rules(errors: dict, v: dict, find: str, from_data: bool) -> None:
    a, f = v.get("accrual"), v.get("follow_up")
    if isinstance(a, (int, float)) and isinstance(f, (int, float)) and not a + f > 0:
        errors.setdefault("assumptions.follow_up", []).append(
            f"accrual + follow_up must be greater than 0; got {a:g} + {f:g}"
        )
    for path, why in _piece_errors(v):
        errors.setdefault(path, []).append(why)


def _piece_errors(v: dict) -> list[tuple[str, str]]:
    """The piecewise fields checked together: cut points increasing, one hazard per piece."""
    out = []
    cuts, hazards = v.get("cut_points"), v.get("control_hazards")
    if cuts is not None and hazards is None:
        out.append(("assumptions.cut_points", "needs control_hazards, one hazard per piece"))
    if isinstance(cuts, list) and any(b <= a for a, b in zip(cuts, cuts[1:], strict=False)):
        out.append(("assumptions.cut_points", f"must be strictly increasing; got {cuts}"))
    if isinstance(hazards, list):
        pieces = len(cuts) + 1 if isinstance(cuts, list) else 1
        if len(hazards) != pieces:
            out.append(
                (
                    "assumptions.control_hazards",
                    f"must list {pieces} hazard(s), one per piece between the cut points; "
                    f"got {len(hazards)}",
                )
            )
    rates, a = v.get("accrual_rates"), v.get("accrual")
    if rates is not None and isinstance(a, (int, float)) and a == 0:
        out.append(("assumptions.accrual_rates", "needs an accrual period greater than 0"))
    return out


validate = make_validate(FIELDS, FORMS, "hazard_ratio", ("hazard_ratio",), _rules)
groups = two_groups
allocation = two_group_allocation


def control_hazard(q: dict) -> float:
    """The control hazard: posted, or ln 2 / the posted median (the first piece's when piecewise)."""
    v = values(q, FIELDS)
    if v.get("control_hazards") is not None:
        return float(v["control_hazards"][0])
    if v.get("control_hazard") is not None or v.get("control_median") is None:
        return number(q, FIELDS, "control_hazard")
    return math.log(2.0) / number(q, FIELDS, "control_median")


def uses_profile(q: dict) -> bool:
    """True when a field beyond the exponential closed form is given."""
    v = values(q, FIELDS)
    return any(v.get(name) is not None for name in PROFILE_FIELDS)


def timeline(q: dict) -> dict:
    """Return the checked accrual, follow-up and loss hazard (and the profile's extra settings:
    hazard multipliers per piece relative to the first, the lag, the per-group loss, the accrual
    rates; only when the question uses them, so closed-form chunk tasks keep their digits)."""
    out = {
        "accrual": number(q, FIELDS, "accrual"),
        "follow_up": number(q, FIELDS, "follow_up"),
        "loss_hazard": number(q, FIELDS, "loss_hazard"),
    }
    if out["accrual"] + out["follow_up"] <= 0:
        raise QuestionError(
            "assumptions.follow_up", "accrual + follow_up must be greater than 0; got 0"
        )
    if (q.get("hypothesis") or {}).get("aim") == "noninferiority":
        _margin(q)
        if number(q, FIELDS, "treatment_lag", required=False):
            raise QuestionError(
                "assumptions.treatment_lag",
                "a delayed treatment effect is answered for superiority only; remove the lag or "
                "the noninferiority margin",
            )
    if uses_profile(q):
        p = profile(q, 1.0)
        out.update(
            {
                "cut_points": list(p.cut_points),
                "hazard_shape": [h / p.control_hazards[0] for h in p.control_hazards],
                "treatment_lag": p.lag,
                "loss_hazard_treatment": p.loss[1],
                "accrual_rates": list(p.accrual_rates),
            }
        )
    return out


def profile(q: dict, hr: float) -> survival_profile.Profile:
    """The question's timeline as a numerical profile (checked), at hazard ratio ``hr``."""
    v = values(q, FIELDS)
    errors = _piece_errors(v)
    if errors:
        raise QuestionError(*errors[0])
    hazards = v.get("control_hazards")
    if hazards is None:
        hazards = [control_hazard(q)]
    for h in hazards:
        if not (isinstance(h, (int, float)) and h > 0 and math.isfinite(h)):
            raise QuestionError("assumptions.control_hazards", f"must be > 0; got {h}")
    loss = number(q, FIELDS, "loss_hazard")
    loss_t = number(q, FIELDS, "loss_hazard_treatment", required=False)
    lag = number(q, FIELDS, "treatment_lag", required=False) or 0.0
    accrual = number(q, FIELDS, "accrual")
    rates = v.get("accrual_rates") or [1.0]
    return survival_profile.Profile(
        cut_points=tuple(float(c) for c in v.get("cut_points") or ()),
        control_hazards=tuple(float(h) for h in hazards),
        hazard_ratio=hr,
        lag=float(lag),
        loss=(loss, loss if loss_t is None else loss_t),
        accrual=accrual,
        follow_up=number(q, FIELDS, "follow_up"),
        accrual_rates=tuple(float(r) for r in rates) if accrual > 0 else (1.0,),
    )


def _setup(q: dict) -> dict:
    """Return the checked inputs: events formula, control hazard, the timeline and the margin."""
    aim = check_aim(q, DESIGN)
    analysis_of(q, DESIGN, "analytic")
    out = {
        "events_formula": values(q, FIELDS)["events_formula"],
        "hazard": control_hazard(q),
        "margin": _margin(q) if aim == "noninferiority" else None,
        **timeline(q),
    }
    lag = number(q, FIELDS, "treatment_lag", required=False) or 0.0
    out["lag"] = lag
    if out["margin"] is not None and out["events_formula"] == "freedman":
        raise QuestionError(
            "analysis_options.events_formula",
            "'freedman' answers superiority only; a noninferiority margin on the hazard ratio "
            "uses 'schoenfeld'",
        )
    if out["margin"] is not None and lag > 0:
        raise QuestionError(
            "assumptions.treatment_lag",
            "a delayed treatment effect is answered for superiority only; remove the lag or "
            "the noninferiority margin",
        )
    return out


def _margin(q: dict) -> float:
    """The noninferiority margin: a hazard ratio above 1 (lower hazards are better)."""
    h = q.get("hypothesis") or {}
    margin = h.get("margin")
    if h.get("higher_is_better", True):
        raise QuestionError(
            "hypothesis.higher_is_better",
            "must be false for a time-to-event noninferiority question: a lower hazard is "
            "better and the margin is the largest acceptable hazard ratio (above 1)",
        )
    if not isinstance(margin, (int, float)) or not margin > 1:
        raise QuestionError(
            "hypothesis.margin",
            "for a time-to-event outcome the noninferiority margin is a hazard ratio "
            f"(treatment over control) greater than 1; got {margin}",
        )
    return float(margin)


def _hr(q: dict) -> float:
    """Return the hazard ratio, checked positive and different from 1 (below the margin for
    noninferiority)."""
    hr = number(q, FIELDS, "hazard_ratio")
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if aim == "noninferiority":
        margin = _margin(q)
        if not hr < margin:
            raise QuestionError(
                "effect.hazard_ratio",
                f"must be below the noninferiority margin {margin:g} when solving for the "
                f"sample size; got {hr:g}",
            )
        return hr
    if hr == 1:
        raise QuestionError("effect.hazard_ratio", f"must be greater than 0 and not 1; got {hr:g}")
    return hr


def p_event(hazard: float, accrual: float, follow_up: float, loss: float = 0.0) -> float:
    """Return P(event observed) under exponential event and loss hazards, uniform accrual."""
    theta = hazard + loss
    if accrual == 0:
        return hazard / theta * -math.expm1(-theta * follow_up)
    # e^(−θf) − e^(−θ(a+f)) written with expm1 to stay accurate when θ·a is small.
    not_seen = -math.exp(-theta * follow_up) * math.expm1(-theta * accrual) / (theta * accrual)
    return hazard / theta * (1.0 - not_seen)


def _gap(s: dict, hr: float) -> float:
    """The log hazard ratio the test must find: |ln HR|, or ln margin − ln HR (signed)."""
    if s["margin"] is not None:
        return math.log(s["margin"]) - math.log(hr)
    return abs(math.log(hr))


def _events(formula: str, hr: float, r: float, z_total: float, gap: float) -> float:
    """Return the events needed; r is the treatment:control allocation."""
    if formula == "freedman":
        return z_total**2 * (1.0 + r * hr) ** 2 / (r * (1.0 - hr) ** 2)
    p = 1.0 / (1.0 + r)
    return z_total**2 / (p * (1.0 - p) * gap**2)


def _shift(formula: str, hr: float, r: float, events: float, gap: float) -> float:
    """Return the standardized log-rank mean for the expected number of events."""
    if formula == "freedman":
        return math.sqrt(events * r) * abs(1.0 - hr) / (1.0 + r * hr)
    p = 1.0 / (1.0 + r)
    return math.sqrt(events * p * (1.0 - p)) * gap


def _p_events(q: dict, s: dict, hr: float) -> tuple[float, float]:
    """Return P(event) in the control and treatment groups (closed form when it applies)."""
    if uses_profile(q):
        prof = profile(q, hr)
        return survival_profile.p_event(prof, 0), survival_profile.p_event(prof, 1)
    a, f, loss = s["accrual"], s["follow_up"], s["loss_hazard"]
    lam = s["hazard"]
    return p_event(lam, a, f, loss), p_event(lam * hr, a, f, loss)


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded subjects per group from the required events and P(event) per group.

    With a delayed effect: the total from the Lakatos drift, N = (zα + zβ)² / drift², and the
    events it is expected to give.
    """
    s = _setup(q)
    hr = _hr(q)
    r = allocation(q)[1]
    z_total = z_sum(alpha, tails(q), float(q["target_power"]))
    pc, pt = _p_events(q, s, hr)
    mean = (pc + r * pt) / (1.0 + r)
    if s["lag"] > 0:
        total = (z_total / survival_profile.drift(profile(q, hr), r)) ** 2
        raw = total * mean
    else:
        raw = _events(s["events_formula"], hr, r, z_total, _gap(s, hr))
        total = None
    required = int(math.ceil(raw - _EPS))
    if total is None:
        total = required / mean
    return Solution(
        per_group=[total / (1.0 + r), total * r / (1.0 + r)],
        details={
            "events": {
                "required": required,
                "raw": raw,
                "probability": {"control": pc, "treatment": pt, "mean": mean},
                "subjects_total_raw": total,
                # with a delayed effect the drift sets N; the events are what N is expected
                # to give, not a requirement of their own
                **({"basis": "expected"} if s["lag"] > 0 else {}),
            }
        },
    )


def _power_at(q: dict, hr: float, per_group: list[float], alpha: float) -> float:
    """Return the power from the expected events at the given n per group."""
    s = _setup(q)
    n1, n2 = float(per_group[0]), float(per_group[1])
    if s["lag"] > 0:
        shift = math.sqrt(n1 + n2) * survival_profile.drift(profile(q, hr), n2 / n1)
        return normal_power(shift, z_alpha(alpha, tails(q)), tails(q))
    pc, pt = _p_events(q, s, hr)
    events = n1 * pc + n2 * pt
    shift = _shift(s["events_formula"], hr, n2 / n1, events, _gap(s, hr))
    if s["margin"] is not None:  # one-sided against the margin: the shift keeps its sign
        return float(special.ndtr(shift - z_alpha(alpha, 1)))
    return normal_power(shift, z_alpha(alpha, tails(q)), tails(q))


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the power from the expected number of events at the given n per group.

    A hazard ratio of 1 is answered: the power is then the size of the test.
    """
    hr = number(q, FIELDS, "hazard_ratio")
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if aim == "noninferiority":
        _margin(q)
        return _power_at(q, hr, per_group, alpha)
    return _power_at(q, 1.0 if hr == 1 else _hr(q), per_group, alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the hazard ratio nearest 1 reaching the target power at n (for noninferiority:
    the largest hazard ratio, below the margin, that still shows noninferiority).

    Below 1 (longer times), unless a one-sided test looks for shorter times (direction.py).
    """
    s = _setup(q)
    target = float(q["target_power"])
    lo, hi = 1e-6, 1.0 - 1e-12
    if s["margin"] is not None:
        hi = s["margin"] * (1.0 - 1e-12)
    elif tails(q) == 1 and direction.one_sided(q, DESIGN) < 0:
        lo, hi = 1e6, 1.0 + 1e-12
    if _power_at(q, lo, per_group, alpha) < target:
        raise power_unreachable("sample_size.per_group", target, per_group)
    hr = root(lambda h: _power_at(q, h, per_group, alpha) - target, lo, hi)
    return {"field": "hazard_ratio", "value": hr}


def events_timing(q: dict, per_group: list[float], events: dict) -> dict:
    """The calendar time (from the first entry) at which the expected events reach the
    required number, at the enrolled sizes; added to the record's ``events`` block."""
    if not events or events.get("required") is None:
        return {}
    hr = number(q, FIELDS, "hazard_ratio", required=False)
    if hr is None:
        return {}
    prof = profile(q, hr)
    # With a delayed effect the events are what the drift's N is expected to give (unrounded),
    # not a requirement of their own: time the unrounded number.
    target = float(events["raw"] if events.get("basis") == "expected" else events["required"])
    when = survival_profile.calendar_time(prof, per_group, target)
    return {"calendar_time": when, "time_unit": values(q, FIELDS)["time_unit"]}


def derive(q: dict) -> dict:
    """The control hazard when the investigator gave the median."""
    v = values(q, FIELDS)
    if v.get("control_hazard") is None and v.get("control_median") is not None:
        return {"control_hazard": control_hazard(q)}
    return {}


def warnings_for(q: dict, per_group: list[float]) -> list[str]:
    """Return plain-language warnings about few expected events or a hazard ratio far from 1."""
    out = []
    hr = values(q, FIELDS).get("hazard_ratio")
    if hr is None:
        return out
    s = _setup(q)
    pc, pt = _p_events(q, s, float(hr))
    events = float(per_group[0]) * pc + float(per_group[1]) * pt
    if events < 30:
        out.append(
            f"Only {events:.1f} events are expected: the log-rank normal approximation "
            "is rough with so few; a simulation is safer."
        )
    if not 0.5 <= float(hr) <= 2.0:
        out.append(
            f"A hazard ratio of {float(hr):g} is far from 1, where the events formula is "
            "least accurate; a simulation is safer."
        )
    return out


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    s = _setup(q)
    notes = []
    if s["lag"] > 0:
        name = (
            "log-rank power by the continuous-time Lakatos drift, N = (zα + zβ)² / drift², "
            "the hazard ratio 1 until the lag"
        )
        ref = (
            "Lakatos (1988), Biometrics 44:229; Schoenfeld (1981), Biometrika 68:316; "
            "Lachin & Foulkes (1986), Biometrics 42:507"
        )
        notes.append(
            "The log-rank mean and variance per subject are integrated over follow-up time from "
            "the numbers at risk in each group (Lakatos's Markov steps made infinitely small); "
            "events = subjects × the allocation-weighted mean P(event)."
        )
    elif s["events_formula"] == "freedman":
        name = "log-rank events by Freedman, (zα + zβ)²(1 + r·HR)² / (r(1 − HR)²)"
        ref = "Freedman (1982), Stat Med 1:121; Lachin & Foulkes (1986), Biometrics 42:507"
    elif s["margin"] is not None:
        name = (
            "log-rank events by Schoenfeld against a noninferiority margin, "
            "(zα + zβ)² / (p(1 − p)·(ln margin − ln HR)²)"
        )
        ref = "Schoenfeld (1983), Biometrics 39:499; Lachin & Foulkes (1986), Biometrics 42:507"
    else:
        name = "log-rank events by Schoenfeld, (zα + zβ)² / (p(1 − p)·ln²HR)"
        ref = "Schoenfeld (1983), Biometrics 39:499; Lachin & Foulkes (1986), Biometrics 42:507"
    if uses_profile(q):
        notes.append(
            "P(event) per group is integrated numerically over entry times: piecewise-constant "
            "hazards, accrual at the given relative rates, loss to follow-up per group as a "
            "competing risk, the analysis at the end of follow-up."
        )
    else:
        notes.append(
            "Subjects = required events ÷ the allocation-weighted mean P(event); P(event) "
            "assumes exponential survival, uniform accrual over the accrual period, further "
            "follow-up after it, and exponential loss to follow-up as a competing risk."
        )
    notes.append("r is the treatment:control allocation and p = 1/(1 + r) the control share.")
    return analytic_method("logrank", DESIGN.analysis("logrank").label, name, ref, notes, derive(q))


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Exponential event times at the control hazard and hazard × hazard ratio."""
    lam, hr = control_hazard(q), number(q, FIELDS, "hazard_ratio")
    return [
        {"family": "exponential", "scale": 1.0 / lam},
        {"family": "exponential", "scale": 1.0 / (lam * hr)},
    ]


def check_models(q: dict, arms: list[dict], labels: list[str]) -> None:
    """Event times need a family whose draws are positive; piecewise hazards and a delayed
    effect are drawn from exponential groups (their scales give each group's base hazard)."""
    for a, lab in zip(arms, labels, strict=True):
        if uses_profile(q) and a["family"] != "exponential":
            raise QuestionError(
                f"simulation.data.{lab}.family",
                "piecewise hazards, accrual rates, a loss hazard per group or a treatment lag "
                f"are simulated from exponential groups; got {a['family']!r}",
            )
        if _is_ni(q) and a["family"] not in ("exponential", "weibull"):
            raise QuestionError(
                f"simulation.data.{lab}.family",
                "a noninferiority margin on the hazard ratio is simulated with exponential or "
                f"Weibull groups (proportional hazards); got {a['family']!r}",
            )
        if a["family"] not in models.POSITIVE:
            raise QuestionError(
                f"simulation.data.{lab}.family",
                "event times need a positive family "
                f"({', '.join(sorted(models.POSITIVE))}); got {a['family']!r}",
            )


def _is_ni(q: dict) -> bool:
    return (q.get("hypothesis") or {}).get("aim") == "noninferiority"


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    if rule.aim == "noninferiority":
        # The boundary of the null: the treatment hazard is the margin times the control's.
        margin, control = float(rule.margin), dict(arms[0])
        shape = control.get("shape", 1.0) if control["family"] == "weibull" else 1.0
        treated = {**control, "scale": control["scale"] / margin ** (1.0 / shape)}
        return [arms[0], treated], (
            f"treatment hazard set to the margin, {margin:g} times the control hazard; "
            "accrual, follow-up and loss unchanged"
        )
    return [arms[0], dict(arms[0])], (
        "treatment event times drawn from the control distribution (hazard ratio 1); "
        "accrual, follow-up and loss unchanged"
    )


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    """Longer times count as better, so a one-sided search looks below 1; only when shorter
    times are better does it look above 1 (each candidate's test faces its own direction)."""
    if rule.aim == "noninferiority":  # the largest hazard ratio below the margin that passes
        return EffectAxis(float(rule.margin), -1, float(rule.margin))
    if rule.tails == 1 and rule.direction < 0:
        return EffectAxis(1.0, 1, math.inf)
    return EffectAxis(1.0, -1, 1.0)


def approximate_n(plan, target: float) -> float | None:
    from ..approximate import logrank_first

    return logrank_first(plan, target)


def implied_fields(q: dict, arms: list[dict]) -> dict:
    """The hazard ratio (and control hazard) of proportional-hazards groups."""
    a, b = arms
    hr = lam = None
    if not (a.get("shift") or b.get("shift")):
        if a["family"] == b["family"] == "exponential":
            hr, lam = a["scale"] / b["scale"], 1.0 / a["scale"]
        elif a["family"] == b["family"] == "weibull" and a["shape"] == b["shape"]:
            k = a["shape"]
            hr, lam = (a["scale"] / b["scale"]) ** k, (None if k != 1 else 1.0 / a["scale"])
    if hr is None:
        return {
            "fields": {},
            "missing": ["hazard_ratio", "control_hazard"],
            "note": "the event-time groups do not have proportional hazards, so no single "
            "hazard ratio describes them",
        }
    fields = {"hazard_ratio": hr}
    if lam is not None:  # in the form the investigator used: a median or a hazard
        if (q.get("assumptions") or {}).get("control_median") is not None:
            fields["control_median"] = math.log(2.0) / lam
        else:
            fields["control_hazard"] = lam
    return {"fields": fields}


SIMULATION = SimulationModel(
    data_keys=("control", "treatment"),
    default_data=default_data,
    null_data=null_data,
    kernels={"logrank": "logrank"},
    effect_axis=effect_axis,
    check_models=check_models,
    settings=timeline,
    data_block=lambda arms, labels, settings: {
        **{lab: models.public(a) for lab, a in zip(labels, arms, strict=True)},
        **settings,
    },
    implied_contrast=lambda arms: models.center(arms[1]) - models.center(arms[0]),
    implied_fields=implied_fields,
    approximate_n=approximate_n,
    direction_sign=-1,  # the log-rank z falls when treatment has fewer events: longer times
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    hr = values(q, FIELDS).get("hazard_ratio")
    if hr is None and record and record.get("effect"):
        hr = record["effect"]["value"]
    if hr is None:
        return "the hazard ratio, treatment over control"
    return f"a hazard ratio of {fmt(hr)} (treatment over control)"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    unit = v.get("time_unit") or "time units"
    per = unit[:-1]
    if v.get("control_median") is not None:
        base = (
            f"a median time to the event of {fmt(v['control_median'])} {unit} in the control group"
        )
    elif v.get("control_hazard") is not None:
        base = f"a control hazard of {fmt(v['control_hazard'])} events per person per {per}"
    elif v.get("control_hazards") is not None:
        base = _pieces_text(v, unit, per)
    else:
        return ""
    parts = [base]
    if v.get("treatment_lag"):
        parts.append(
            f"no treatment effect (hazard ratio 1) during the first {fmt(v['treatment_lag'])} "
            f"{unit}"
        )
    if v.get("accrual") is not None:
        accrual = f"{fmt(v['accrual'])} {unit} of accrual"
        if v.get("accrual_rates") is not None:
            rates = ":".join(fmt(r) for r in v["accrual_rates"])
            accrual += f" at relative rates {rates} over equal parts of it"
        parts.append(accrual)
    if v.get("follow_up") is not None:
        parts.append(f"{fmt(v['follow_up'])} {unit} of further follow-up")
    loss_t = v.get("loss_hazard_treatment")
    if loss_t is not None and loss_t != v.get("loss_hazard"):
        parts.append(
            f"loss-to-follow-up hazards of {fmt(v.get('loss_hazard') or 0)} per {per} in the "
            f"control group and {fmt(loss_t)} in the treatment group"
        )
    elif v.get("loss_hazard"):
        parts.append(f"a loss-to-follow-up hazard of {fmt(v['loss_hazard'])} per {per}")
    return ", ".join(parts[:-1]) + " and " + parts[-1] if len(parts) > 1 else base


def _pieces_text(v: dict, unit: str, per: str) -> str:
    """'control hazards of 0.08 per month until month 12 and 0.05 after'."""
    hazards, cuts = v["control_hazards"], v.get("cut_points") or []
    if not cuts:
        return f"a control hazard of {fmt(hazards[0])} events per person per {per}"
    spans = [f"{fmt(h)} until {per} {fmt(c)}" for h, c in zip(hazards, cuts, strict=False)]
    return (
        f"control hazards (events per person per {per}) of {', '.join(spans)} and "
        f"{fmt(hazards[-1])} after"
    )


def _contrast(q: dict) -> float | None:
    hr = values(q, FIELDS).get("hazard_ratio")
    if not isinstance(hr, (int, float)) or not hr > 0:
        return None
    return -math.log(hr)


DESIGN = Design(
    outcome="time_to_event",
    layout="two_groups",
    label="Time to event, two groups",
    fields=FIELDS,
    forms=FORMS,
    solved="hazard_ratio",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "logrank",
    groups=groups,
    allocation=allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=warnings_for,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_heart_failure_survival.json",
    sequential=True,
    contrast=_contrast,
    null_effect=lambda q: 1.0,
    events_timing=events_timing,
    margin_on_effect=True,
)
