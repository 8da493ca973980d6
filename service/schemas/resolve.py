"""The normalized question: defaults resolved from the cell's design, and the engine's direction.

Used twice with the same rules: by the cross-field checks (on a question still under check, to
count groups and read the effect's direction) and by ``QuestionSchema``'s post-load step.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service.engine import direction as engine_direction
from service.engine.adjust import split_total
from service.engine.designs import interim as interim_block
from service.engine.errors import QuestionError
from service.engine.models import check_arm

from .fields import posted
from .shared import defaults


def default_alpha(aim: str, design: Any = None) -> float:
    """The alpha used when none is posted: 0.05, or one-sided 0.025 for noninferiority and
    equivalence, the level regulatory guidance expects of such trials (ICH E9, 1998, 5.5);
    a cell may set its own equivalence level (average bioequivalence: 0.05 per test)."""
    if aim == "equivalence" and design is not None:
        return design.equivalence_alpha
    return 0.05 if aim == "superiority" else 0.025


def from_data(raw: Any, find: str | None) -> bool:
    """True when the posted question simulates a posted data model (it implies the effect)."""
    if not isinstance(raw, Mapping) or find == "effect":
        return False
    sim = raw.get("simulation")
    return (
        raw.get("method") in (None, "simulation")
        and isinstance(sim, Mapping)
        and isinstance(sim.get("data"), Mapping)
    )


def _solved_posted(design: Any, raw: Mapping) -> bool:
    block = next(f.block for f in design.fields if f.name == design.solved)
    return posted(raw.get(block), design.solved)


def method(design: Any, data: dict, raw: Mapping) -> str:
    """The posted method; else the one the posted analysis offers (analytic first); else
    simulation for a data model posted without the effect it implies; else analytic."""
    if data.get("method") is not None:
        return data["method"]
    asked = next((a for a in design.analyses if a.name == data.get("analysis")), None)  # valid
    if asked is not None:
        return "analytic" if "analytic" in asked.methods else asked.methods[0]
    find = data.get("find") or "sample_size"
    if from_data(raw, find) and not _solved_posted(design, raw):
        return "simulation"
    if not any("analytic" in a.methods for a in design.analyses):
        return "simulation"
    return "analytic"


def analysis(design: Any, method_: str, aim: str, blocks: dict, data: dict) -> str | None:
    """The design's default analysis when the method and aim take it, else the cell's first
    analysis that does; None when none does."""
    fits = design.analyses_for(method_, aim)
    q = {
        **blocks,
        "find": data.get("find") or "sample_size",
        "method": method_,
        "hypothesis": data.get("hypothesis") or _hypothesis_default(),
    }
    preferred = design.default_analysis(q)
    if preferred in fits:
        return preferred
    return fits[0] if fits else None


def _hypothesis_default() -> dict:
    from .blocks import HypothesisSchema

    return defaults(HypothesisSchema)


def normalize(design: Any, data: dict, raw: Mapping, blocks: dict) -> dict:
    """The normalized question (VOCAB §1): what was posted, every default filled in."""
    from .blocks import AdjustmentsSchema, simulation_schema

    find = data.get("find") or "sample_size"
    hyp = {**_hypothesis_default(), **(data.get("hypothesis") or {})}
    aim = hyp["aim"]
    how = method(design, data, raw)
    two_sided = aim == "superiority" and not getattr(design, "one_sided_only", False)
    alternative = data.get("alternative") or ("two-sided" if two_sided else "one-sided")
    sim = data.get("simulation") if how == "simulation" else None
    if how == "simulation" and sim is None:
        sim = simulation_schema(design).load({})
    q = {
        "outcome": design.outcome,
        "layout": design.layout,
        "analysis": data.get("analysis") or analysis(design, how, aim, blocks, data),
        "find": find,
        "alpha": default_alpha(aim, design) if data.get("alpha") is None else data["alpha"],
        "alternative": alternative,
        "target_power": None
        if find == "power"
        else (0.80 if data.get("target_power") is None else data["target_power"]),
        "effect": blocks.get("effect", {}),
        "assumptions": blocks.get("assumptions", {}),
        "analysis_options": blocks.get("analysis_options", {}),
        "hypothesis": hyp,
        "allocation_ratio": 1.0
        if data.get("allocation_ratio") is None
        else data["allocation_ratio"],
        "allocation_rounding": data.get("allocation_rounding") or "each_group",
        "sample_size": None,
        "adjustments": data.get("adjustments") or defaults(AdjustmentsSchema),
        "method": how,
        "simulation": sim,
    }
    if aim == "estimation":
        estimation(q, hyp)
    if isinstance(data.get("interim"), Mapping) and "looks" in data["interim"]:
        # Only when posted: a question without interim analyses keeps its record digits.
        q["interim"] = interim_block.normalize(data["interim"])
    if data.get("assurance") is not None:  # only when asked: other questions keep their form
        q["assurance"] = {k: v for k, v in data["assurance"].items() if v is not None}
    size = data.get("sample_size")
    if size is not None and find != "sample_size":
        if size.get("per_group") is not None:
            q["sample_size"] = {"per_group": list(size["per_group"])}
        elif size.get("total") is not None:
            q["sample_size"] = {"per_group": split_total(size["total"], design.allocation(q))}
    hyp_raw = raw.get("hypothesis") if isinstance(raw, Mapping) else None
    if (
        aim == "superiority"
        and alternative == "one-sided"
        and not posted(hyp_raw, "higher_is_better")
    ):
        # Unstated: the one-sided test looks where the effect points; the record says so.
        hyp["higher_is_better"] = one_sided(design, q) > 0
    return q


def estimation(q: dict, hyp: dict) -> None:
    """A precision question in normal form: the interval's half-width, confidence and assurance
    in the hypothesis; no test level, power or direction (DEVELOPERS.md, "The question")."""
    from .blocks import DEFAULT_CONFIDENCE

    q["hypothesis"] = {
        "aim": "estimation",
        "half_width": None if q["find"] == "precision" else hyp.get("half_width"),
        "confidence": DEFAULT_CONFIDENCE if hyp.get("confidence") is None else hyp["confidence"],
        "assurance": hyp.get("assurance"),
    }
    q.update(alpha=None, target_power=None, alternative="two-sided")


def group_count(design: Any, q: dict) -> int | None:
    """The number of groups of the (checked) question, or None when it cannot be told yet."""
    try:
        return int(design.groups(q))
    except (KeyError, TypeError, ValueError, QuestionError):
        return None


# -- the engine's direction rule (engine/direction.py) ------------------------------------------


def assumed_effect(design: Any, q: dict) -> float | None:
    """The assumed effect minus its null value, on the outcome scale (None when not given)."""
    return engine_direction.assumed_effect(q, design)


def one_sided(design: Any, q: dict) -> int:
    """+1 or -1: where the one-sided alternative looks."""
    return engine_direction.one_sided(q, design, _implied(design, q))


def direction_conflict(design: Any, q: dict) -> str | None:
    """Why a posted higher_is_better contradicts the assumed effect, or None."""
    return engine_direction.conflict(q, design, _implied(design, q))


def _implied(design: Any, q: dict) -> float | None:
    """The effect a posted data model implies (engine/direction.py), or None."""
    data = (q.get("simulation") or {}).get("data")
    if q.get("method") != "simulation" or not isinstance(data, Mapping):
        return None
    keys = getattr(design.simulation, "data_keys", ())
    try:
        if keys == ("groups",):
            return None  # k groups have no one-sided direction
        models = [check_arm(dict(data[k]), f"simulation.data.{k}") for k in keys]
        return engine_direction.implied(design, models)
    except (KeyError, TypeError, ValueError, ArithmeticError, QuestionError):
        return None  # an invalid data model is reported by its own checks
