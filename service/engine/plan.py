"""A simulation plan: the question as group data models (with and without the effect), a kernel
and its decision rule. Design-agnostic: every cell-specific fact comes from the Design object.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from . import designs, direction, implied, models
from .designs.base import DecisionRule, Design, EffectAxis
from .designs.common import analysis_of, hypothesis, tails
from .errors import QuestionError
from .kernels import KERNELS


@dataclass(frozen=True)
class Plan:
    """What every chunk of one simulated question shares.

    ``weights`` are the relative group sizes (control or first group first); ``data`` is the
    record's ``method.data``; ``summaries`` says whether chunks draw summary statistics.
    """

    design: Design
    analysis: str
    kernel: str
    rule: DecisionRule
    alpha: float
    models: list[dict]
    null: list[dict]
    null_model: str
    settings: dict
    summaries: bool
    labels: list[str]
    weights: list[float]
    min_size: int
    data: dict

    def with_weights(self, weights: list[float]) -> Plan:
        return dataclasses.replace(self, weights=[float(w) for w in weights])


@dataclass(frozen=True)
class SimSettings:
    """The checked ``simulation`` block: seed, replicates, chunk size, search replicates, rule."""

    seed: int
    replicates: int
    chunk_size: int
    search_replicates: int
    decision_rule: str

    @classmethod
    def of(cls, q: dict) -> SimSettings:
        sim = q["simulation"]
        seed = sim.get("seed")
        if (
            seed is None
            or isinstance(seed, bool)
            or not isinstance(seed, int)
            or not 0 <= seed < 2**53
        ):
            raise QuestionError(
                "simulation.seed", f"must be an integer in [0, 2**53); got {seed!r}"
            )
        reps = int(sim.get("replicates", 10000))
        chunk_size = int(sim.get("chunk_size", 1000))
        search_reps = min(int(sim.get("search_replicates", 2000)), reps)
        rule = sim.get("decision_rule", "point")
        for name, value in (
            ("replicates", reps),
            ("chunk_size", chunk_size),
            ("search_replicates", search_reps),
        ):
            if value < 1:
                raise QuestionError(f"simulation.{name}", f"must be ≥ 1; got {value}")
        if rule not in ("point", "lower_bound"):
            raise QuestionError(
                "simulation.decision_rule", f"must be 'point' or 'lower_bound'; got {rule!r}"
            )
        return cls(seed, reps, chunk_size, search_reps, rule)


def design_of(q: dict) -> Design:
    """The question's cell (QuestionError on outcome or layout when there is none)."""
    return designs.get(q.get("outcome"), q.get("layout"))


def simulated_analysis(q: dict, design: Design) -> str:
    """The question's analysis, checked to be simulated for the cell and the aim."""
    if design.simulation is None:
        raise QuestionError("method", f"{design.cell} is not simulated; use method analytic")
    return analysis_of(q, design, "simulation")


def decision_rule(q: dict, design: Design) -> DecisionRule:
    """The rule before the groups are known: aim, tails, the direction the effect points."""
    aim, margin, higher = hypothesis(q)
    count = tails(q)
    better = 1 if higher else -1
    # One-sided: towards the assumed effect (direction.py); make_plan re-aims it at the groups.
    pointing = direction.one_sided(q, design) if count == 1 else better
    if aim != "superiority":
        if margin is None:
            raise QuestionError("hypothesis.margin", f"is required for {aim}")
        return DecisionRule(aim, "one-sided", pointing, float(margin))
    return DecisionRule(aim, "one-sided" if count == 1 else "two-sided", pointing, None)


def _cluster(q: dict, design: Design, arms: list[dict], labels: list[str]) -> dict | None:
    """The cluster settings a chunk needs (analyzed mean size, cv, ICC), or None.

    With clusters, per_group counts clusters and the test is the cluster-level t (cluster_sim).
    """
    adj = q.get("adjustments") or {}
    c = adj.get("cluster")
    if not c:
        return None
    if design.cluster is None:
        raise QuestionError("adjustments.cluster", f"is not offered for {design.cell}")
    want = design.cluster.family
    for a, lab in zip(arms, labels, strict=True):
        if a["family"] != want:
            raise QuestionError(
                f"simulation.data.{lab}.family",
                f"cluster trials are simulated with {want} outcomes; got {a['family']!r}",
            )
    keep = 1.0 - float(adj.get("dropout") or 0.0)
    return {
        "mean_size": float(c["mean_size"]) * keep,
        "cv": float(c.get("cv") or 0.0),
        "icc": float(c["icc"]),
    }


def _default_labels(design: Design, count: int) -> list[str]:
    keys = design.simulation.data_keys
    if keys == ("groups",) or (not keys and count > 1):
        return [f"groups.{i}" for i in range(count)]
    return list(keys) if keys else ["pairs"]


def make_plan(q: dict, alpha: float) -> Plan:
    """Return the simulation plan of a normalized question."""
    design = design_of(q)
    sim = q.get("simulation")
    if not isinstance(sim, dict):
        raise QuestionError("simulation", "is required when method is simulation")
    analysis = simulated_analysis(q, design)
    model = design.simulation
    if not 0 < alpha < 1:
        raise QuestionError("alpha", f"must be in (0, 1); got {alpha!r}")
    rule = decision_rule(q, design)
    posted = sim.get("data")
    if posted is not None:
        arms, labels = implied.posted_models(posted, design)
    else:
        arms = model.default_data(q)
        labels = _default_labels(design, len(arms))
        if model.data_keys:
            arms = [
                models.check_arm(a, f"simulation.data.{lab}")
                for a, lab in zip(arms, labels, strict=True)
            ]
    if model.check_models is not None:
        model.check_models(q, arms, labels)
    settings = dict(model.settings(q)) if model.settings is not None else {}
    if rule.tails == 1 and rule.aim == "superiority":
        # Towards the effect the simulated groups imply (the posted data model, if any).
        aim = direction.one_sided(q, design, direction.implied(design, arms))
        rule = rule.facing(model.direction_sign * aim)
    cl = _cluster(q, design, arms, labels)
    base = KERNELS[model.kernels[analysis]]
    kernel = model.kernels[analysis]
    if cl is not None:
        settings["cluster"] = cl
        kernel = "cluster_t"
        summaries = base.always_summaries
    else:
        normal = all(a["family"] == "normal" for a in arms)
        summaries = base.always_summaries or (base.summaries and normal)
    if q.get("interim"):
        settings["interim"] = _interim(q, kernel, alpha, rule)
        kernel, summaries = "sequential", False
    null, null_text = model.null_data(q, arms, rule)
    # Named groups (two groups; a control and its treatment groups) follow the design's
    # allocation; a list of groups is planned equal.
    weights = [1.0] * len(arms)
    if len(arms) >= 2 and model.data_keys != ("groups",):
        ratio = float(q.get("allocation_ratio") or 1.0)
        if ratio <= 0:
            raise QuestionError("allocation_ratio", f"must be > 0; got {ratio:g}")
        weights = [float(w) for w in design.allocation(q)]
    if model.data_block is not None:
        data = model.data_block(arms, labels, settings)
    elif model.data_keys == ("groups",):
        data = {"groups": [models.public(a) for a in arms]}
    else:
        data = {lab: models.public(a) for lab, a in zip(labels, arms, strict=True)}
    return Plan(
        design=design,
        analysis=analysis,
        kernel=kernel,
        rule=rule,
        alpha=alpha,
        models=arms,
        null=null,
        null_model=null_text,
        settings=settings,
        summaries=summaries,
        labels=labels,
        weights=weights,
        min_size=model.min_size,
        data=data,
    )


def _interim(q: dict, base: str, alpha: float, rule: DecisionRule) -> dict:
    """The sequential kernel's settings: the base kernel, the looks and the efficacy boundaries
    (z scale, by numerical integration at the planned information fractions)."""
    from . import seqsim, sequential

    if base not in seqsim.BASES:
        raise QuestionError(
            "interim",
            f"the {q.get('analysis')} analysis is not simulated with interim analyses; the "
            "simulated sequential test is offered for t, z, rank and Fisher exact tests",
        )
    plan = sequential.Plan.of(q["interim"])
    sides = rule.tails
    upper = sequential.efficacy_bounds(plan.t, alpha, sides, plan.efficacy, plan.efficacy_gamma)
    return {
        "kernel": base,
        "fractions": list(plan.fractions),
        "upper": [float(c) for c in upper],
        "sides": sides,
    }


def per_group_for(plan: Plan, m: int) -> list[int]:
    """The group sizes when the first group has ``m`` (others by the allocation, rounded up)."""
    w = plan.weights
    return [m] + [max(1, math.ceil(m * wi / w[0] - 1e-9)) for wi in w[1:]]


def first_min(plan: Plan) -> int:
    """The smallest first-group size whose every group meets the analyses' minimum."""
    m = plan.min_size
    while min(per_group_for(plan, m)) < plan.min_size:
        m += 1
    return m


def effect_setup(q: dict) -> tuple[str, EffectAxis]:
    """Check a find = effect simulation question; return the field it moves and its axis."""
    design = design_of(q)
    sim = q.get("simulation")
    if not isinstance(sim, dict):
        raise QuestionError("simulation", "is required when method is simulation")
    name = design.solved
    if sim.get("data") is not None:
        raise QuestionError(
            "simulation.data",
            f"a simulated find = effect moves effect.{name} in groups built from the effect and "
            "assumptions; a posted data model has no single effect parameter to move: remove "
            "simulation.data, or ask find = power for each candidate data model",
        )
    simulated_analysis(q, design)
    return name, design.simulation.effect_axis(q, decision_rule(q, design))


def with_effect(q: dict, name: str, value: float) -> dict:
    """The question with its effect field ``name`` set to ``value``."""
    return dict(q, effect={**(q.get("effect") or {}), name: value})
