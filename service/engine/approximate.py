"""Normal approximations of the first group's size: the simulated search's starting point and the
cost estimate's scale. A cell may name its own (``SimulationModel.approximate_n``); the moment
approximation below serves the rest (one or two groups whose models have finite moments).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, special, stats

from . import implied, models, search
from .chunks import ChunkTask, draws_per_replicate
from .plan import Plan, effect_setup, first_min, make_plan, per_group_for, with_effect

FALLBACK_FIRST = 50  # first-group size tried when no approximation exists (e.g. Cauchy data)
_COST_SPAN = 1.5  # the estimate assumes candidates within 1.5× the start
_RANK_TESTS = ("rank_sum", "signed_rank", "kruskal_wallis")  # 3/π efficiency on normal data


def _z(p: float) -> float:
    return float(special.ndtri(p))


def _ratio(plan: Plan) -> float:
    w = plan.weights
    return w[1] / w[0] if len(w) == 2 else 1.0


def _za_zb(plan: Plan, target: float) -> tuple[float, float]:
    rule, alpha = plan.rule, plan.alpha
    two = rule.aim == "superiority" and rule.tails == 2
    return (_z(1 - alpha / 2) if two else _z(1 - alpha)), _z(target)


def first_size(plan: Plan, target: float) -> float | None:
    """A normal-approximation size of the first group reaching ``target``, or None."""
    cl = plan.settings.get("cluster")
    if cl:  # individuals × design effect ÷ analyzed cluster size = clusters
        settings = {k: v for k, v in plan.settings.items() if k != "cluster"}
        plain = Plan(**{**plan.__dict__, "settings": settings})
        n = first_size(plain, target)
        de = 1.0 + ((cl["cv"] ** 2 + 1.0) * cl["mean_size"] - 1.0) * cl["icc"]
        return None if n is None else max(2.0, n * de / cl["mean_size"])
    own = plan.design.simulation.approximate_n
    if own is not None:
        return own(plan, target)
    return moments_first(plan, target)


def correlation_first(plan: Plan, target: float) -> float | None:
    """Pairs from Fisher's z."""
    za, zb = _za_zb(plan, target)
    r, r_null = plan.models[0]["r"], plan.settings["r_null"]
    gap = abs(math.atanh(r) - math.atanh(r_null))
    return ((za + zb) / gap) ** 2 + 3 if gap > 0 else None


def logrank_first(plan: Plan, target: float) -> float | None:
    """Schoenfeld's events over the mean P(event) of the groups' (mean-time) hazards."""
    za, zb = _za_zb(plan, target)
    ratio = _ratio(plan)
    s = plan.settings
    hazards = [1.0 / models.center(a) for a in plan.models]
    hr = hazards[1] / hazards[0]
    if hr == 1:
        return None

    def p_event(lam: float) -> float:
        t = lam + s["loss_hazard"]
        a, f = s["accrual"], s["follow_up"]
        stay = math.exp(-t * f) if a == 0 else (math.exp(-t * f) - math.exp(-t * (a + f))) / (t * a)
        return lam / t * (1 - stay)

    events = (za + zb) ** 2 * (1 + ratio) ** 2 / (ratio * math.log(hr) ** 2)
    return events / (p_event(hazards[0]) + ratio * p_event(hazards[1]))


def proportions_first(plan: Plan, target: float) -> float | None:
    """Pooled-variance z for superiority; a shifted Wald z against a margin."""
    za, zb = _za_zb(plan, target)
    ratio = _ratio(plan)
    p1, p2 = plan.models[0]["p"], plan.models[1]["p"]
    if plan.rule.aim == "superiority":
        gap = abs(p2 - p1)
        pbar = (p1 + ratio * p2) / (1 + ratio)
        num = za * math.sqrt(pbar * (1 - pbar) * (1 + 1 / ratio)) + zb * math.sqrt(
            p1 * (1 - p1) + p2 * (1 - p2) / ratio
        )
        return (num / gap) ** 2 if gap > 0 else None
    var = p1 * (1 - p1) + p2 * (1 - p2) / ratio
    return _shifted_n(p2 - p1, var, plan, za, zb, target)


def noether_first(plan: Plan, target: float) -> float | None:
    """Noether (1987): N = (za + zb)² / (12·c·(1 − c)·(P(Y > X) − ½)²), c the control share;
    P(Y > X) comes from the data models, so skewed or heavy-tailed groups start well."""
    za, zb = _za_zb(plan, target)
    p_sup = implied.prob_superiority(plan.models[0], plan.models[1])
    c = 1.0 / (1.0 + _ratio(plan))
    if abs(p_sup - 0.5) < 1e-12:
        return None
    return c * (za + zb) ** 2 / (12 * c * (1 - c) * (p_sup - 0.5) ** 2)


def k_groups_first(plan: Plan, target: float) -> float | None:
    """Per group from the noncentral chi-square with f² from the models' moments."""
    mv = [models.moments(a) for a in plan.models]
    if any(m is None or v is None for m, v in mv):
        return None
    are = 3 / math.pi if plan.analysis in _RANK_TESTS else 1.0
    means = np.array([m for m, _ in mv])
    f2 = float(means.var()) / float(np.mean([v for _, v in mv]))
    if f2 <= 0:
        return None
    k = len(plan.models)
    crit = stats.chi2.isf(plan.alpha, k - 1)
    lam = optimize.brentq(lambda x: stats.ncx2.sf(crit, k - 1, x) - target, 1e-6, 1e7)
    return lam / (k * f2) / are


def moments_first(plan: Plan, target: float) -> float | None:
    """One or two groups from their means and variances (rank tests at 3/π efficiency)."""
    if plan.analysis == "rank_sum" and len(plan.models) == 2:
        return noether_first(plan, target)
    mv = [models.moments(a) for a in plan.models]
    if any(m is None or v is None for m, v in mv):
        return None
    za, zb = _za_zb(plan, target)
    are = 3 / math.pi if plan.analysis in _RANK_TESTS else 1.0
    if len(mv) == 1:
        m, v = mv[0]
        return ((za + zb) ** 2 * v / (m * m) + 1) / are if m != 0 else None
    (m1, v1), (m2, v2) = mv
    var = v1 + v2 / _ratio(plan)
    if plan.rule.aim == "superiority":
        gap = abs(m2 - m1)
        return (za + zb) ** 2 * var / gap**2 / are + 1 if gap > 0 else None
    n = _shifted_n(m2 - m1, var, plan, za, zb, target)
    return None if n is None else n + 1


def _shifted_n(diff: float, var: float, plan: Plan, za: float, zb: float, target: float):
    """Normal-approximation n for a non-inferiority or TOST test of a difference."""
    rule = plan.rule
    if rule.aim == "noninferiority":
        gap = rule.direction * (diff - rule.margin)
    else:
        gap = rule.margin - abs(diff)
        if diff == 0:
            zb = _z((1 + target) / 2)
    return (za + zb) ** 2 * var / gap**2 if gap > 0 else None


# --- the cost estimate --------------------------------------------------------------------------


def _alpha(q: dict) -> float:
    k = int(((q.get("adjustments") or {}).get("comparisons")) or 1)
    return float(q.get("alpha", 0.05)) / k


def _draws(plan: Plan, per_group: list[int]) -> int:
    task = ChunkTask(
        kernel=plan.kernel,
        analysis=plan.analysis,
        models=plan.models,
        per_group=[int(n) for n in per_group],
        alpha=plan.alpha,
        rule=plan.rule.to_dict(),
        settings=plan.settings,
        summaries=plan.summaries,
        seed=0,
        stream=0,
        chunk=0,
        chunk_size=1,
        replicates=1,
    )
    return draws_per_replicate(task)


def estimate_cost(q: dict) -> int:
    """Return an upper estimate of random draws: replicates × draws per replicate × candidates.

    For a sample-size search it assumes at most 15 search candidates and four full runs
    (confirmation at n and n − 1, one move, the type I check), all within 1.5× the start; an
    effect search, 15 candidates and four full runs at the posted n.
    """
    sim = q["simulation"]
    reps = int(sim.get("replicates", 10000))
    search_reps = min(int(sim.get("search_replicates", 2000)), reps)
    posted = list((q.get("sample_size") or {}).get("per_group") or [])
    if q.get("find") == "effect":
        name, axis = effect_setup(q)
        x = 1.0 if not math.isfinite(axis.x_max) else axis.x_max / 2
        p = make_plan(with_effect(q, name, axis.value(x)), _alpha(q))
        return (search.MAX_CANDIDATES * search_reps + 4 * reps) * _draws(p, posted)
    p = make_plan(q, _alpha(q))
    if q.get("find") == "power":
        cl = (q.get("adjustments") or {}).get("cluster")
        if cl and cl.get("mean_size"):  # enrolled people → clusters
            posted = [math.ceil(n / float(cl["mean_size"])) for n in posted]
        return 2 * reps * _draws(p, posted)
    m0 = first_size(p, float(q.get("target_power") or 0.8)) or FALLBACK_FIRST
    per_group = per_group_for(p, max(first_min(p), math.ceil(_COST_SPAN * m0)))
    return (search.MAX_CANDIDATES * search_reps + 4 * reps) * _draws(p, per_group)
