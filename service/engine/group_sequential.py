"""A question's interim analyses: the bridge between a cell's fixed design and sequential.py.

A cell's analytic power at n gives the drift of its z statistic, Φ⁻¹(power) + z_{1−α/sides}
(the normal approximation every sequential cell's test has), so one boundary computation
serves every cell: the maximum size is the fixed size times the inflation factor, and the
power of a given size is the sequential power at that size's drift. Events drive the
information of a time-to-event question, so its looks are counted in events.
"""

from __future__ import annotations

import copy
import math

from scipy.special import ndtr, ndtri

from . import sequential as gs
from .designs import interim as block_rules
from .errors import QuestionError

REFERENCE = (
    "Lan & DeMets (1983) alpha spending; boundaries by the recursive numerical integration "
    "of Armitage, McPherson & Rowe (1969); Jennison & Turnbull (2000)"
)


def active(q: dict) -> bool:
    return bool(q.get("interim"))


def check(q: dict, design) -> None:
    """Refuse what the interim block cannot answer, naming the field (the schema says the same)."""
    errors = block_rules.check(q["interim"])
    why = block_rules.refusal(design, q)
    if why:
        raise QuestionError(*why)
    for path, messages in errors.items():
        raise QuestionError(path, messages[0])


def _sides(q: dict) -> int:
    return 2 if q.get("alternative", "two-sided") == "two-sided" else 1


def _plan(q: dict) -> gs.Plan:
    return gs.Plan.of(q["interim"])


def design_drift(q: dict, alpha: float) -> dict:
    """The drift the sequential design needs for the target power, and its inflation factor."""
    return gs.solve(_plan(q), alpha, _sides(q), float(q["target_power"]))


def drift_at(design, q: dict, per_group: list[float], alpha: float) -> tuple[float, float]:
    """(the drift of the cell's z statistic at these sizes, the fixed design's power there)."""
    fixed = float(design.power(q, per_group, alpha))
    fixed = min(max(fixed, 1e-12), 1.0 - 1e-12)
    return max(0.0, float(ndtri(fixed) + ndtri(1.0 - alpha / _sides(q)))), fixed


def answer(
    design,
    q: dict,
    alpha: float,
    analyzed: list[float],
    enrolled: list[int],
    solved: dict | None,
    events: dict | None,
) -> dict:
    """The record's ``sequential`` block and the sequential power at the analyzed sizes.

    ``solved``: the design drift (find = sample_size or effect), whose futility boundaries the
    enrolled sizes keep; None for find = power (futility spends the beta of the sizes given).
    """
    plan, sides = _plan(q), _sides(q)
    drift, fixed_power = drift_at(design, q, analyzed, alpha)
    target_beta = None if solved is None else 1.0 - float(q["target_power"])
    out = gs.evaluate(
        plan,
        alpha,
        sides,
        drift,
        target_beta,
        design_drift=None if solved is None else solved["drift"],
    )
    looks = []
    total = sum(enrolled)
    required = (events or {}).get("required")
    if required is None:
        required = expected_events(design, q, alpha, analyzed)
    for k, t in enumerate(plan.fractions):
        upper = out["upper"][k]
        row = {
            "look": k + 1,
            "fraction": t,
            "per_group": [math.ceil(n * t - 1e-9) for n in analyzed],
            "efficacy_z": upper,
            "efficacy_p": float((1.0 - ndtr(upper)) * sides),
            "futility_z": None,
            "futility_p": None,
            "alpha_spent": float(out["alpha_spent"][k]),
            "stop_null": {
                "efficacy": out["null"]["efficacy"][k] + out["null"]["other"][k],
                "futility": out["null"]["futility"][k],
            },
            "stop_alternative": {
                "efficacy": out["alternative"]["efficacy"][k],
                "futility": out["alternative"]["futility"][k],
            },
        }
        if required is not None:
            row["events"] = math.ceil(required * t - 1e-9)
        if out["lower"] is not None and k < len(plan.fractions) - 1:
            row["futility_z"] = out["lower"][k]
            row["futility_p"] = float(1.0 - ndtr(out["lower"][k]))
        looks.append(row)
    block = {
        "looks": looks,
        "efficacy_spending": plan.efficacy,
        "futility_spending": plan.futility or "none",
        "binding_futility": False,
        "alternative": q.get("alternative", "two-sided"),
        "fixed_power": fixed_power,
        "drift": drift,
        "expected_total_null": out["expected_fraction_null"] * total,
        "expected_total_alternative": out["expected_fraction_alternative"] * total,
        "reference": REFERENCE,
    }
    if plan.efficacy == "hwang_shih_decani":
        block["efficacy_gamma"] = plan.efficacy_gamma
    if plan.futility == "hwang_shih_decani":
        block["futility_gamma"] = plan.futility_gamma
    if solved is not None:
        block["inflation"] = solved["inflation"]
    if required is not None:
        block["expected_events_null"] = out["expected_fraction_null"] * required
        block["expected_events_alternative"] = out["expected_fraction_alternative"] * required
    return {"block": block, "power": out["power"]}


def inflate(raw: list[float], events: dict | None, factor: float) -> tuple[list, dict | None]:
    """The maximum sizes (and events) of the sequential design: the fixed design's × IF.

    Events drive a time-to-event design: its final analysis needs ceil(raw events × IF), and
    the subjects follow from the events as in the fixed design (same P(event) per group).
    """
    if not events or events.get("required") is None:
        return [x * factor for x in raw], events
    out = copy.deepcopy(events)
    out["fixed_required"] = out["required"]
    out["required"] = math.ceil(out["raw"] * factor - 1e-9)
    out["raw"] = out["raw"] * factor
    scale = out["required"] / out["fixed_required"]
    if "subjects_total_raw" in out:
        out["subjects_total_raw"] = out["subjects_total_raw"] * scale
    return [x * scale for x in raw], out


def expected_events(design, q: dict, alpha: float, per_group: list[float]) -> float | None:
    """The events expected at these sizes, for a cell whose solution counts events (the
    information of a time-to-event test); None for other cells."""
    basis = dict(q, target_power=q.get("target_power") or 0.8)  # P(event) ignores the power
    details = design.solve_n(basis, alpha).details.get("events")
    if not details or "probability" not in details:
        return None
    p = details["probability"]
    return per_group[0] * p["control"] + per_group[1] * p["treatment"]


def fixed_equivalent(per_group: list[float], factor: float) -> list[float]:
    """The fixed-design sizes with the same power as a sequential design of these sizes."""
    return [n / factor for n in per_group]


def note(q: dict) -> str:
    """The method note: how the interim analyses were planned."""
    block = q["interim"]
    words = block_rules.LABELS
    text = (
        f"{block['looks']} analyses with efficacy boundaries by the "
        f"{words[block['efficacy_spending']]} alpha-spending function; "
        f"boundaries and power by numerical integration ({REFERENCE})"
    )
    if (block.get("futility_spending") or "none") != "none":
        text += (
            f"; non-binding futility boundaries by the {words[block['futility_spending']]} "
            "beta-spending function (the efficacy boundaries ignore them, so alpha holds "
            "whether or not the trial stops for futility)"
        )
    return text


def analytic_power(design, q: dict, per_group: list[float], alpha: float) -> float | None:
    """The sequential power by numerical integration at these sizes (the cell's normal drift),
    printed beside a simulated one; None when the cell's formula cannot answer."""
    from .starting import EXPECTED, analytic_basis

    basis = analytic_basis(design, q)
    if basis is None:
        return None
    try:
        drift, _ = drift_at(design, basis, per_group, alpha)
        return float(gs.evaluate(_plan(q), alpha, _sides(q), drift, None)["power"])
    except EXPECTED:
        return None


def _share(count: int, reps: int) -> float:
    return count / reps if reps else 0.0


def simulated_block(q: dict, alpha: float, sim: dict, enrolled: list[int]) -> dict:
    """The record's ``sequential`` block of a simulated sequential test: the same keys as the
    analytic block, the stopping probabilities and expected sizes counted over the replicates
    (efficacy stops on either side for a two-sided test), with their Monte Carlo errors."""
    plan, sides = _plan(q), _sides(q)
    reps = sim["replicates"]
    spent = gs.alpha_spent(plan.efficacy, plan.t, alpha, sides, plan.efficacy_gamma)
    looks, expected = [], {}
    from .seqsim import look_sizes

    analyzed = sim["per_group"]
    for k, t in enumerate(plan.fractions):
        upper = sim["upper"][k]
        looks.append(
            {
                "look": k + 1,
                "fraction": t,
                "per_group": [look_sizes(n, plan.fractions)[k] for n in analyzed],
                "efficacy_z": upper,
                "efficacy_p": float((1.0 - ndtr(upper)) * sides),
                "futility_z": None,
                "futility_p": None,
                "alpha_spent": float(spent[k]),
                "stop_null": {
                    "efficacy": _share(sim["null"]["stops"][k], reps),
                    "futility": 0.0,
                },
                "stop_alternative": {
                    "efficacy": _share(sim["alternative"]["stops"][k], reps),
                    "futility": 0.0,
                },
            }
        )
    total = sum(enrolled)
    for name in ("null", "alternative"):
        stops = [_share(c, reps) for c in sim[name]["stops"]]
        stop = list(stops[:-1]) + [1.0 - sum(stops[:-1])]
        fraction = sum(t * s for t, s in zip(plan.fractions, stop, strict=True))
        # the spread of the stopping fraction gives the Monte Carlo error of its mean
        second = sum(t * t * s for t, s in zip(plan.fractions, stop, strict=True))
        sd = math.sqrt(max(second - fraction * fraction, 0.0))
        expected[f"expected_total_{name}"] = fraction * total
        expected[f"expected_total_{name}_mcse"] = sd * total / math.sqrt(reps) if reps else None
        expected[f"expected_analyzed_{name}"] = _share(sim[name]["subjects"], reps)
    block = {
        "looks": looks,
        "efficacy_spending": plan.efficacy,
        "futility_spending": "none",
        "binding_futility": False,
        "alternative": q.get("alternative", "two-sided"),
        "method": "simulation",
        "replicates": reps,
        **expected,
        "reference": REFERENCE,
    }
    if plan.efficacy == "hwang_shih_decani":
        block["efficacy_gamma"] = plan.efficacy_gamma
    return block


def simulated_note(q: dict) -> str:
    """The method note of a simulated sequential test."""
    block = q["interim"]
    return (
        f"{block['looks']} analyses with efficacy boundaries by the "
        f"{block_rules.LABELS[block['efficacy_spending']]} alpha-spending function, computed "
        f"by numerical integration ({REFERENCE}); each replicate's test statistic is computed "
        "at every analysis on the data accrued so far, put on the z scale through its p-value "
        "and compared with the boundaries: power, type I error, the stopping probabilities "
        "and the expected size are the shares of replicates, not formulas"
    )
