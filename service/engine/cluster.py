"""Cluster-randomized two-group trials: whole clusters are the unit of randomization and analysis.

The analysis is the cluster-level summary test: each cluster's mean (or proportion), groups
compared by a t test with k₁ + k₂ − 2 degrees of freedom (Donner & Klar 2000). Power is the
noncentral t at that df with the noncentrality of the individual-level comparison at the
effective size k·m/DE per group, DE = 1 + ((cv² + 1)·m − 1)·ICC (Eldridge, Ashby & Kerry 2006;
cv = 0 gives Donner & Klar's 1 + (m − 1)·ICC). With equal cluster sizes and normal outcomes this
is exact for the t test on cluster means. Dropout removes people inside clusters: the analyzed
cluster size is m·(1 − dropout), and clusters are enrolled whole.
"""

from __future__ import annotations

import math

from scipy import optimize, stats

from .errors import QuestionError

# Fewer clusters than this per group gets a warning: common practice, no source.
FEW_CLUSTERS = 10
MAX_CLUSTERS = 100_000
MAX_SIZE = 1_000_000
_EPS = 1e-9


def settings(q: dict) -> dict | None:
    """Return the question's cluster block with defaults (cv 0), or None without clustering."""
    adj = q.get("adjustments") or {}
    c = adj.get("cluster")
    if not c:
        return None
    k = c.get("clusters_per_group")
    m = c.get("mean_size")
    return {
        "mean_size": None if m is None else float(m),
        "icc": float(c["icc"]),
        "cv": float(c.get("cv") or 0.0),
        "clusters_per_group": None if k is None else int(k),
        "dropout": float(adj.get("dropout") or 0.0),
    }


def check(q: dict, design) -> dict:
    """Return the cluster settings of a question the cluster path can answer, or refuse it."""
    c = settings(q)
    if c is None:  # pragma: no cover - callers test for a cluster block first
        raise QuestionError("adjustments.cluster", "is required here")
    if design.cluster is None:
        from . import designs

        offered = [d.cell for d in designs.all() if d.cluster is not None]
        raise QuestionError(
            "adjustments.cluster",
            f"cluster randomization is offered for {' and '.join(offered)} (two groups of "
            f"whole clusters, compared by the cluster-level t test); got {design.cell}",
        )
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if aim == "equivalence":
        raise QuestionError(
            "hypothesis.aim",
            "equivalence is not offered with clusters; use superiority or noninferiority",
        )
    find = q.get("find")
    if c["clusters_per_group"] is not None and find != "sample_size":
        raise QuestionError(
            "adjustments.cluster.clusters_per_group",
            "fixes the number of clusters when solving for the cluster size (find = "
            "sample_size); for find = power or effect give sample_size.per_group as whole "
            "clusters (clusters × mean_size)",
        )
    if c["mean_size"] is None and c["clusters_per_group"] is None:
        raise QuestionError(
            "adjustments.cluster.mean_size",
            "is required (or give clusters_per_group to solve for the cluster size)",
        )
    return c


def design_effect(m: float, icc: float, cv: float = 0.0) -> float:
    """Return 1 + ((cv² + 1)·m − 1)·ICC, rounded to 12 decimals (1.95, not 1.9500000000000002)."""
    return round(1.0 + ((cv * cv + 1.0) * m - 1.0) * icc, 12)


def ratio(q: dict) -> float:
    return float(q.get("allocation_ratio") or 1.0)


def clusters_for(k1: int, r: float) -> list[int]:
    """Return clusters per group when the control group has ``k1`` (treatment by the ratio, rounded up)."""
    return [k1, max(2, int(math.ceil(k1 * r - _EPS)))]


def _design(q: dict):
    from . import designs

    return designs.get(q["outcome"], q["layout"])


def _scale(q: dict) -> tuple[float, float, float, str, int]:
    """Return (distance from the null, variance per person in each group, aim, tails).

    The distance is signed towards the alternative for non-inferiority and absolute for
    superiority (the analytic answer tests towards the assumed effect).
    """
    hyp = q.get("hypothesis") or {}
    aim = hyp.get("aim", "superiority")
    diff, v1, v2 = _design(q).cluster.scale(q)
    if aim == "noninferiority":
        direction = 1.0 if hyp.get("higher_is_better", True) else -1.0
        return direction * (diff - float(hyp["margin"])), v1, v2, aim, 1
    return abs(diff), v1, v2, aim, 1 if q.get("alternative") == "one-sided" else 2


def effective(clusters: list[float], m_analyzed: float, icc: float, cv: float) -> list[float]:
    """Return the effective number of individuals per group, k·m/DE."""
    de = design_effect(m_analyzed, icc, cv)
    return [k * m_analyzed / de for k in clusters]


def t_power(ncp: float, df: float, alpha: float, tails: int) -> float:
    """Return the power of a t test with noncentrality ``ncp`` towards the alternative."""
    if tails == 2:
        crit = stats.t.isf(alpha / 2, df)
        if ncp == 0:
            return float(alpha)
        up = stats.nct.sf(crit, df, abs(ncp))
        down = stats.nct.cdf(-crit, df, abs(ncp))
        return float(min(max(up + down, 0.0), 1.0))
    crit = stats.t.isf(alpha, df)
    if ncp == 0:
        return float(alpha)
    return float(min(max(stats.nct.sf(crit, df, ncp), 0.0), 1.0))


def power(q: dict, clusters: list[float], m_analyzed: float, alpha: float) -> float:
    """Return the cluster-level t power with ``clusters`` per group of analyzed size ``m_analyzed``."""
    c = settings(q)
    gap, v1, v2, _, tails = _scale(q)
    n1, n2 = effective(clusters, m_analyzed, c["icc"], c["cv"])
    ncp = gap / math.sqrt(v1 / n1 + v2 / n2)
    return t_power(ncp, sum(clusters) - 2.0, alpha, tails)


def limit_power(q: dict, clusters: list[float], alpha: float) -> float:
    """Return the power as the cluster size grows without bound (between-cluster variance only)."""
    c = settings(q)
    if c["icc"] == 0:
        return 1.0
    gap, v1, v2, _, tails = _scale(q)
    per = (c["cv"] ** 2 + 1.0) * c["icc"]  # k·m/DE → k/((cv² + 1)·ICC)
    ncp = gap / math.sqrt(v1 * per / clusters[0] + v2 * per / clusters[1])
    return t_power(ncp, sum(clusters) - 2.0, alpha, tails)


def _smallest(ok, low: int, limit: int) -> int | None:
    """Return the smallest integer ≥ ``low`` where the monotone ``ok`` holds (None above limit)."""
    if ok(low):
        return low
    lo, hi = low, low * 2
    while not ok(hi):
        lo, hi = hi, hi * 2
        if hi > limit:
            return None
    while hi - lo > 1:  # ok(hi), not ok(lo)
        mid = (lo + hi) // 2
        lo, hi = (lo, mid) if ok(mid) else (mid, hi)
    return hi


def solve_clusters(q: dict, m_analyzed: float, alpha: float, target: float) -> int:
    """Return the smallest clusters in the control group (≥ 2) whose cluster-level power ≥ target."""
    r = ratio(q)
    k = _smallest(
        lambda k: power(q, clusters_for(k, r), m_analyzed, alpha) >= target, 2, MAX_CLUSTERS
    )
    if k is None:
        raise QuestionError(
            "target_power",
            f"more than {MAX_CLUSTERS} clusters per group would be needed; check the effect",
        )
    return k


def min_clusters_any_size(q: dict, alpha: float, target: float) -> int | None:
    """Return the fewest clusters per control group that reach ``target`` with unbounded clusters."""
    r = ratio(q)
    return _smallest(lambda k: limit_power(q, clusters_for(k, r), alpha) >= target, 2, MAX_CLUSTERS)


def solve_size(q: dict, clusters: list[int], alpha: float, target: float) -> int:
    """Return the smallest whole enrolled cluster size reaching ``target`` with fixed clusters.

    Refuses when no size is enough: as m grows the design effect grows with it, and the power
    approaches the limit of the between-cluster variance alone (Hemming et al. 2011).
    """
    c = settings(q)
    keep = 1.0 - c["dropout"]

    def ok(m: int) -> bool:
        return power(q, clusters, m * keep, alpha) >= target

    if limit_power(q, clusters, alpha) < target or not ok(MAX_SIZE):
        best = limit_power(q, clusters, alpha)
        need = min_clusters_any_size(q, alpha, target)
        more = (
            f"; at least {need} clusters per group are needed (with very large clusters), "
            "more with clusters of a practical size"
            if need is not None
            else ""
        )
        raise QuestionError(
            "adjustments.cluster.clusters_per_group",
            f"no cluster size is enough: with {clusters[0]} clusters per group and ICC "
            f"{c['icc']:g} the power cannot exceed {best:.3f} however large the clusters "
            f"(the between-cluster variance does not shrink with cluster size){more}",
        )
    return _smallest(ok, 1, 2 * MAX_SIZE)


def clusters_of(per_group: list[int], m: float) -> list[int]:
    """Return whole clusters per group for an enrolled per-group count, refusing partial clusters."""
    out = []
    for n in per_group:
        k = int(round(n / m))
        if k < 2 or abs(k * m - n) >= 1.0 - _EPS:
            lo, hi = max(2, math.floor(n / m)), max(2, math.ceil(n / m))
            raise QuestionError(
                "sample_size.per_group",
                f"must hold whole clusters of mean size {m:g} (at least 2 per group): "
                f"{n} is {n / m:.2f} clusters; give {math.ceil(lo * m - _EPS)} or "
                f"{math.ceil(hi * m - _EPS)}",
            )
        out.append(k)
    return out


def people(clusters: list[int], m: float) -> list[int]:
    """Return people per group: clusters × mean size (rounded up when the mean is fractional)."""
    return [int(math.ceil(k * m - _EPS)) for k in clusters]


def warnings(clusters: list[int]) -> list[str]:
    """Return the few-clusters warning (threshold: common practice, no source)."""
    if min(clusters) < FEW_CLUSTERS:
        return [
            f"only {min(clusters)} clusters per group: with fewer than {FEW_CLUSTERS} per group "
            "(a common rule of thumb, no published source) the cluster-level test rests on few "
            "units, the ICC estimate is unstable and chance imbalance between groups is likely; "
            "consider more clusters, stratified or matched randomization"
        ]
    return []


def method_notes(q: dict) -> list[str]:
    """Return the method notes that say how clusters were handled."""
    notes = [
        "Cluster-randomized: whole clusters are randomized and the analysis is the cluster-level "
        "summary test (a t test on cluster means or proportions, each person counting once) "
        "with k₁ + k₂ − 2 degrees of freedom (Donner & Klar 2000); power is the noncentral t "
        "at that df with the effective size k·m/DE per group.",
        "Design effect 1 + ((cv² + 1)·m − 1)·ICC with m the analyzed mean cluster size and cv "
        "the coefficient of variation of cluster size (Eldridge, Ashby & Kerry 2006; cv = 0 "
        "gives 1 + (m − 1)·ICC, Donner & Klar 2000).",
        "Dropout removes people inside clusters: the analyzed cluster size is "
        "mean_size × (1 − dropout); clusters are enrolled whole and the per-group count is "
        "clusters × mean_size.",
    ]
    note = _design(q).cluster.note
    if note:
        notes.append(note)
    return notes


def solve_effect(q: dict, clusters: list[int], m_analyzed: float, alpha: float) -> dict:
    """Return the smallest effect reaching the target power (superiority only)."""
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if aim != "superiority":
        raise QuestionError(
            "hypothesis.aim", "find = effect with clusters is offered for superiority only"
        )
    target = float(q["target_power"])
    e = dict(q.get("effect") or {})
    up = (q.get("hypothesis") or {}).get("higher_is_better", True)
    sign = 1.0 if up else -1.0
    design = _design(q)
    name, origin = design.solved, float(design.null_effect(q))
    top = design.cluster.effect_top(q, sign)

    def at(x: float) -> float:
        return power(dict(q, effect={**e, name: origin + sign * x}), clusters, m_analyzed, alpha)

    if at(top) < target:
        raise QuestionError(
            "sample_size.per_group",
            f"no {name} reaches power {target:g} with {clusters} clusters per group; "
            "enrol more clusters or lower the target power",
        )
    x = optimize.brentq(lambda v: at(v) - target, 1e-12, top, xtol=1e-12)
    return {"field": name, "value": origin + sign * x}


def _base(raw: list[float]) -> dict:
    per = [max(2, int(math.ceil(float(x) - _EPS))) for x in raw]
    return {
        "step": "base",
        "unit": "individuals, ignoring clustering",
        "per_group_raw": [float(x) for x in raw],
        "per_group": per,
    }


def _check_method(q: dict) -> None:
    if q.get("method") != "simulation":
        return
    sim = q.get("simulation") or {}
    analysis = q.get("analysis")
    allowed = _design(q).cluster.analyses
    if analysis is not None and analysis not in allowed:
        raise QuestionError(
            "analysis",
            f"cluster trials are simulated with the cluster-level t test, chosen with "
            f"{' or '.join(allowed)}; got {analysis!r}",
        )
    if sim.get("data") is not None:
        raise QuestionError(
            "simulation.data",
            "cluster trials are simulated from the effect and assumptions (normal or beta-binomial "
            "outcomes with the stated ICC); remove simulation.data",
        )
    c = settings(q)
    if c["clusters_per_group"] is not None:
        raise QuestionError(
            "adjustments.cluster.clusters_per_group",
            "solving for the cluster size is analytic only; use method analytic, or give "
            "mean_size and simulate the number of clusters",
        )
    if q.get("find") == "effect":
        raise QuestionError(
            "find", "find = effect with clusters is analytic only; use method analytic"
        )


def _dropout_step(c: dict, **sizes: float) -> dict:
    """The record step for dropout inside clusters (it shrinks the analyzed cluster size)."""
    return {
        "step": "dropout",
        "unit": "people per cluster",
        "rate": c["dropout"],
        "note": "people lost inside clusters; the analyzed cluster size shrinks",
        **sizes,
    }


def answer(q: dict, design, alpha: float, simulate) -> dict:
    """Answer a cluster question: sample_size block, power, effect, simulation and notes.

    ``simulate(per_group, start)`` runs the simulation with per-group counts in clusters.
    """
    c = check(q, design)
    _check_method(q)
    keep = 1.0 - c["dropout"]
    r = ratio(q)
    find = q["find"]
    sim = None
    effect = None
    if find == "sample_size":
        target = float(q["target_power"])
        steps: list[dict] = []
        try:
            steps.append(_base(design.solve_n(q, alpha).per_group))
        except QuestionError:
            if q.get("method") != "simulation":
                raise
        if keep < 1:
            steps.append(_dropout_step(c))
        if c["clusters_per_group"] is None:
            m = c["mean_size"]
            m_a = m * keep
            if keep < 1:
                steps[-1].update(mean_cluster_size=m, analyzed_cluster_size=m_a)
            de = design_effect(m_a, c["icc"], c["cv"])
            if steps:
                inflated = [n * de for n in steps[0]["per_group_raw"]]
                steps.append(
                    {
                        "step": "design_effect",
                        "unit": "individuals (normal approximation, before cluster-level df)",
                        "mean_cluster_size": m,
                        "analyzed_cluster_size": m_a,
                        "cv": c["cv"],
                        "icc": c["icc"],
                        "factor": de,
                        "per_group_raw": inflated,
                        "clusters_per_group": [int(math.ceil(n / m_a - _EPS)) for n in inflated],
                    }
                )
            k1 = solve_clusters(q, m_a, alpha, target)
            clusters = clusters_for(k1, r)
            steps.append(
                {
                    "step": "cluster_df",
                    "unit": "clusters",
                    "df": sum(clusters) - 2,
                    "clusters_per_group": clusters,
                    "power": power(q, clusters, m_a, alpha),
                }
            )
            if q.get("method") == "simulation":
                sim = simulate(None, [float(k) for k in clusters])
                if sim.get("search"):
                    sim["search"]["unit"] = "clusters per group"
                clusters = [int(k) for k in sim["per_group"]]
                steps.append(
                    {
                        "step": "simulation",
                        "unit": "clusters",
                        "clusters_per_group": clusters,
                        "power": sim["power"]["estimate"],
                    }
                )
        else:
            clusters = clusters_for(c["clusters_per_group"], r)
            m = float(solve_size(q, clusters, alpha, target))
            m_a = m * keep
            if keep < 1:
                steps[-1].update(mean_cluster_size=m, analyzed_cluster_size=m_a)
            steps.append(
                {
                    "step": "cluster_size",
                    "unit": "people per cluster",
                    "clusters_per_group": clusters,
                    "mean_cluster_size": m,
                    "analyzed_cluster_size": m_a,
                    "cv": c["cv"],
                    "icc": c["icc"],
                    "factor": design_effect(m_a, c["icc"], c["cv"]),
                    "df": sum(clusters) - 2,
                    "power": power(q, clusters, m_a, alpha),
                }
            )
        enrolled = people(clusters, m)
        steps.append(
            {
                "step": "enrolled",
                "unit": "individuals: whole clusters × mean cluster size",
                "clusters_per_group": clusters,
                "mean_cluster_size": m,
                "per_group": enrolled,
                "analyzed_per_group": [k * m_a for k in clusters],
            }
        )
        block = {"per_group": enrolled, "total": sum(enrolled), "steps": steps}
    else:
        m = c["mean_size"]
        m_a = m * keep
        enrolled = [int(n) for n in q["sample_size"]["per_group"]]
        clusters = clusters_of(enrolled, m)
        de = design_effect(m_a, c["icc"], c["cv"])
        steps = [
            {"step": "enrolled", "unit": "individuals", "per_group": enrolled},
            {
                "step": "clusters",
                "unit": "clusters",
                "clusters_per_group": clusters,
                "mean_cluster_size": m,
                "df": sum(clusters) - 2,
            },
        ]
        if keep < 1:
            steps.append(_dropout_step(c, mean_cluster_size=m, analyzed_cluster_size=m_a))
        eff = effective(clusters, m_a, c["icc"], c["cv"])
        steps.append(
            {
                "step": "design_effect",
                "unit": "effective individuals (k·m/DE)",
                "mean_cluster_size": m,
                "analyzed_cluster_size": m_a,
                "cv": c["cv"],
                "icc": c["icc"],
                "factor": de,
                "per_group": eff,
            }
        )
        block = {
            "per_group": enrolled,
            "total": sum(enrolled),
            "steps": steps,
            "analyzed_per_group": eff,
        }
        if find == "effect":
            effect = solve_effect(q, clusters, m_a, alpha)
        elif q.get("method") == "simulation":
            sim = simulate(clusters, None)
    basis = q
    if effect is not None:
        basis = dict(q, effect={**(q.get("effect") or {}), effect["field"]: effect["value"]})
    exact = power(basis, clusters, m_a, alpha)
    if sim is not None:
        est = dict(sim["power"], analytic=exact)
    else:
        est = {"estimate": exact, "mcse": None, "ci95": None, "replicates": None}
    block.update(
        clusters_per_group=clusters,
        mean_cluster_size=m,
        total_clusters=sum(clusters),
    )
    return {
        "sample_size": block,
        "power": est,
        "effect": effect,
        "sim": sim,
        "analyzed": effective(clusters, m_a, c["icc"], c["cv"]),
        "warnings": warnings(clusters),
    }
