"""Seeded Monte Carlo answers: power at n, the smallest n, or the smallest effect, from a plan.

A question becomes a plan (plan.py); work is cut into chunk tasks (chunks.py, run by the kernels
in kernels.py) so that any process may run any chunk; runner.py batches and caches them. Digits
depend only on the question, the seed and the chunk size. This module assembles the answer:
the search, the type I error check and the method block. It never reads a cell's name: the
Design object carries every cell-specific fact.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from . import search
from .approximate import FALLBACK_FIRST, estimate_cost, first_size
from .chunks import BIT_GENERATOR, SEED_SCHEME, STREAM_ALT, STREAM_NULL, run_chunk
from .errors import QuestionError
from .ledger import Ledger
from .plan import Plan, SimSettings, effect_setup, first_min, make_plan, per_group_for, with_effect
from .runner import Executor, Request, Runner

__all__ = ["answer", "estimate_cost", "run_chunk", "size_verdict"]

SIZE_VERDICTS = ("holds", "conservative", "exceeds")


def size_verdict(ci95: list[float], alpha: float) -> str:
    """Return how a simulated size compares with the alpha the test used, by its 95% interval.

    ``exceeds`` when the whole interval lies above alpha (the test is liberal: invalid),
    ``conservative`` when it lies below (valid, at some cost in power), else ``holds``.
    """
    lo, hi = ci95
    if lo > alpha:
        return "exceeds"
    if hi < alpha:
        return "conservative"
    return "holds"


def _replicates_run(ledger: Ledger, reps: int, pair: bool) -> dict:
    """The replicates the search ran, by kind, beside the minimum any search must run.

    The minimum is the confirmation pair (n and n − 1) and the type I check at n, each at the
    full count; chunks reused from a search candidate's run are counted once, when first run.
    """
    counts = {k: ledger.count(k) for k in ("search", "full", "null")}
    minimum = (3 if pair else 2) * reps
    return {**counts, "total": sum(counts.values()), "minimum": minimum, "draws": ledger.draws}


def _estimate_block(est: search.Estimate) -> dict:
    return {"estimate": est.power, "mcse": est.mcse, "ci95": est.ci95, "replicates": est.replicates}


def describe(plan: Plan) -> str:
    """One paragraph saying what each replicate draws and which test it applies."""
    label = plan.design.analysis(plan.analysis).label
    cl = plan.settings.get("cluster")
    if cl:
        outcome = (
            "beta-binomial counts (cluster probabilities from a beta distribution with "
            "intra-cluster correlation ICC)"
            if plan.design.cluster.family == "bernoulli"
            else "normal cluster means (cluster effect N(0, ICC·σ²) plus the mean of the "
            "individual errors N(0, (1 − ICC)·σ²))"
        )
        sizes = (
            f"sizes drawn from a gamma distribution with mean {cl['mean_size']:g} and "
            f"coefficient of variation {cl['cv']:g}, rounded to whole people (at least 1)"
            if cl["cv"] > 0
            else f"{max(1, round(cl['mean_size']))} people each"
        )
        return (
            f"Each replicate draws every cluster of every group ({sizes}) with {outcome}, ICC "
            f"{cl['icc']:g}, and applies the cluster-level t test (group means weighted by "
            "cluster size, pooled between-cluster standard error, clusters − 2 degrees of "
            "freedom) at the stated alpha; sample sizes count clusters per group. Power is the "
            "share of replicates that reject, with its Monte Carlo standard error and Wilson "
            "interval."
        )
    families = {m["family"] for m in plan.models}
    if plan.design.simulation.draws_words:
        how = plan.design.simulation.draws_words
    elif families == {"bivariate_normal"}:
        how = "draws each replicate's sample correlation directly (Bartlett's decomposition of the bivariate normal scatter matrix)"
    elif families == {"linear_regression"}:
        how = "draws every subject's predictors (independent standard normal, the tested ones with equal coefficients giving the stated f², the others with none) and a standard normal error, fits the full and the reduced model by least squares"
    elif families == {"logistic_regression"}:
        how = "draws every subject's covariate (standard normal, or a factor with the stated prevalence), an other covariate correlated √R² with it when R² > 0, and a logistic event, fits the logistic regression by Newton–Raphson (12 steps from the null fit; a replicate with a singular information matrix does not reject)"
    elif families == {"cox_regression"}:
        how = "draws every subject's covariate (normal with the stated SD, or a factor with the stated prevalence), an other covariate correlated √R² with it when R² > 0, an exponential event time with hazard exp(β·x) and censoring at a common follow-up time that gives the stated probability of an event, fits the Cox model by Newton–Raphson on the partial likelihood (12 steps; a replicate with a singular information matrix does not reject)"
    elif families == {"bernoulli"} and plan.summaries:
        how = "draws each group's success count directly (binomial, by inverting one uniform per group)"
    elif plan.summaries:
        how = "draws each group's sample mean and variance directly (normal mean, scaled chi-square variance)"
    else:
        how = "draws every observation of every group from the data model"
    return (
        f"Each replicate {how} and applies the {label} at the stated alpha; power is the "
        "share of replicates that reject, with its Monte Carlo standard error and Wilson interval."
    )


def _result(plan: Plan, q: dict, final, alt, null, settings: SimSettings, warnings) -> dict:
    """The parts of a simulated answer every find shares: power, type I error, method, seeds."""
    lo, hi = null.ci95
    alpha = plan.alpha
    verdict = size_verdict(null.ci95, alpha)
    analysis = plan.design.analysis(plan.analysis)
    if verdict == "exceeds":  # a conservative test is valid: only a liberal one is a warning
        warnings.append(
            f"simulated type I error {null.power:.4f} (95% CI {lo:.4f}–{hi:.4f}) exceeds alpha "
            f"{alpha:g}: the {analysis.label} does not hold its level under this data model, "
            "so a false-positive result is more likely than stated"
        )
    return {
        "per_group": final,
        "power": _estimate_block(alt),
        "type_i_error": {
            **_estimate_block(null),
            "alpha": alpha,
            "verdict": verdict,
            "null_model": plan.null_model,
        },
        "search": None,
        "method": {
            "method": "simulation",
            "analysis": plan.analysis,
            "analysis_label": analysis.label,
            "approximation": "none: Monte Carlo simulation of the test itself",
            "reference": analysis.reference,
            "derived": _derived(plan, q),
            "replicates": settings.replicates,
            "data": plan.data,
            "decision": plan.rule.to_dict(),
            "summary_statistics": plan.summaries,
            "description": describe(plan),
        },
        "warnings": warnings,
        "reproducibility": {
            "seed": settings.seed,
            "bit_generator": BIT_GENERATOR,
            "seed_scheme": SEED_SCHEME,
            "chunk_size": settings.chunk_size,
        },
    }


def _derived(plan: Plan, q: dict) -> dict:
    """The cell's derived quantities, when the question's fields give them (not a data model)."""
    if (q.get("simulation") or {}).get("data") is not None:
        return {}
    return plan.design.derive(q)


def _check_per_group(p: Plan, per_group: list[int] | None, what: str) -> list[int]:
    if per_group is None:
        raise QuestionError("sample_size.per_group", f"is required to simulate {what}")
    count = len(p.weights)
    if len(per_group) != count or any(int(n) < p.min_size for n in per_group):
        raise QuestionError(
            "sample_size.per_group",
            f"needs {count} sizes of at least {p.min_size} for {p.design.cell} with "
            f"{p.analysis}; got {per_group!r}",
        )
    return [int(n) for n in per_group]


def _target(q: dict, what: str) -> float:
    target = q.get("target_power")
    if target is None or not 0 < float(target) < 1:
        raise QuestionError(
            "target_power", f"must be in (0, 1) to search for {what}; got {target!r}"
        )
    return float(target)


def _search_block(source_start, source, target, settings, found, describe_point) -> dict:
    """The search record shared by the n and the effect searches."""
    return {
        "start": source_start,
        "start_source": source,
        "target": target,
        "decision_rule": settings.decision_rule,
        "search_replicates": settings.search_replicates,
        "candidates": [
            {**describe_point(x), "replicates": e.replicates, "power": e.power, "mcse": e.mcse}
            for x, e in found.candidates
        ],
        "confirmation": [
            {
                **describe_point(x),
                "replicates": e.replicates,
                "power": e.power,
                "mcse": e.mcse,
                "ci95": e.ci95,
            }
            for x, e in found.confirmation
        ],
        "moves": found.moves,
    }


def _settled_block(settled: dict, sizes: Callable[[int], list[int]]) -> dict:
    """The record of an n confirmation that stopped below Monte Carlo noise, in per-group sizes."""

    def point(m: int, e: search.Estimate) -> dict:
        return {"per_group": sizes(m), "replicates": e.replicates, "power": e.power, "mcse": e.mcse}

    below = settled["failing_below"]
    return {
        "pair": [point(m, e) for m, e in settled["pair"]],
        "power_per_size": settled["power_per_size"],
        "mcse": settled["mcse"],
        "sizes_per_mcse": settled["sizes_per_mcse"],
        "failing_below": point(*below) if below is not None else None,
    }


def _events(runner: Runner, request: Request, reps: int) -> dict | None:
    """Mean events per replicate when the kernel counts them (time to event)."""
    events = runner.extra_sum("events", request)
    if events is None:
        return None
    return {"mean_per_replicate": events / reps, "replicates": reps}


def _sequential(runner: Runner, alt: Request, null: Request, reps: int) -> dict | None:
    """The simulated sequential test's counts: efficacy stops per look and the analyzed subjects
    at stopping, under the data model as posed and with the effect removed; None without looks."""
    settings = (alt.plan or runner.plan).settings.get("interim")
    if not settings:
        return None
    out = {"replicates": reps, "upper": settings["upper"], "fractions": settings["fractions"]}
    for name, request in (("alternative", alt), ("null", null)):
        out[name] = {
            "stops": [
                runner.extra_sum(f"stop_look_{k + 1}", request) or 0
                for k in range(len(settings["fractions"]))
            ],
            "subjects": runner.extra_sum("subjects_at_stop", request) or 0,
        }
    return out


def answer(
    q: dict,
    alpha: float,
    *,
    per_group: list[int] | None = None,
    start: list[float] | None = None,
    executor: Executor | None = None,
    progress: Callable[[float], None] | None = None,
    cancel: Callable[[], bool] | None = None,
    budget: int | None = None,
) -> dict:
    """Return the simulated answer of a normalized question (per group, power, type I error).

    ``find`` may be ``power``, ``sample_size`` (the n search) or ``effect`` (the smallest effect
    reaching the target power at ``per_group``, for groups built from the effect and
    assumptions). ``budget`` (random draws) is enforced on the draws made, batch by batch.

    Examples
    --------
    >>> q = {"outcome": "continuous", "layout": "two_groups", "analysis": "pooled_t",
    ...      "find": "power", "alternative": "two-sided", "target_power": None,
    ...      "allocation_ratio": 1.0, "sample_size": {"per_group": [30, 30]},
    ...      "effect": {"difference": 0.5}, "assumptions": {"sd": 1.0},
    ...      "hypothesis": {"aim": "superiority", "margin": None, "higher_is_better": True},
    ...      "method": "simulation",
    ...      "simulation": {"replicates": 2000, "seed": 7, "data": None,
    ...                     "decision_rule": "point", "chunk_size": 1000, "search_replicates": 2000}}
    >>> round(answer(q, 0.05, per_group=[30, 30])["power"]["estimate"], 1)
    0.5
    """
    find = q.get("find")
    if find == "effect":
        return _answer_effect(q, alpha, per_group, executor, progress, cancel, budget)
    if find not in ("power", "sample_size"):
        raise QuestionError(
            "find", f"a simulation answers 'sample_size', 'power' or 'effect'; got {find!r}"
        )
    p = make_plan(q, alpha)
    settings = SimSettings.of(q)
    reps = settings.replicates
    warnings: list[str] = []
    search_block = None
    if find == "power":
        final = _check_per_group(p, per_group, "power")
        runner = Runner(
            p,
            settings.seed,
            settings.chunk_size,
            executor,
            progress,
            cancel,
            2 * reps,
            full=reps,
            budget=budget,
        )
        alt, null = runner.batch(
            [Request(STREAM_ALT, final, reps), Request(STREAM_NULL, final, reps)]
        )
    else:
        target = _target(q, "n")
        if per_group:  # a posted per-group shape sets the allocation
            p = p.with_weights(per_group)
        m0, source = _start(q, p, alpha, start, target)
        if source == "default":
            warnings.append(
                f"no analytic approximation for this data model; the search started at {m0:g} "
                "in the first group"
            )
        m_min = first_min(p)
        runner = Runner(
            p,
            settings.seed,
            settings.chunk_size,
            executor,
            progress,
            cancel,
            5 * settings.search_replicates + 4 * reps,
            full=reps,
            budget=budget,
        )

        def evaluate(ms: list[int], r: int, null_at: int | None) -> list[search.Estimate]:
            requests = [Request(STREAM_ALT, per_group_for(p, m), r) for m in ms]
            if null_at is not None:
                requests.append(Request(STREAM_NULL, per_group_for(p, null_at), reps))
            return runner.batch(requests)[: len(ms)]

        found = search.smallest_n(
            evaluate,
            start=m0,
            m_min=m_min,
            m_max=max(1000, int(50 * m0)),
            target=target,
            rule=settings.decision_rule,
            search_replicates=settings.search_replicates,
            replicates=reps,
        )
        warnings.extend(found.warnings)
        final = per_group_for(p, found.m)
        alt, null = runner.batch(
            [Request(STREAM_ALT, final, reps), Request(STREAM_NULL, final, reps)]
        )
        search_block = _search_block(
            [float(x) for x in (start or [])] or per_group_for(p, math.ceil(m0)),
            source,
            target,
            settings,
            found,
            lambda m: {"per_group": per_group_for(p, m)},
        )
        search_block["replicates_run"] = _replicates_run(runner.ledger, reps, found.m - 1 >= m_min)
        if found.settled is not None:
            search_block["settled"] = _settled_block(found.settled, lambda m: per_group_for(p, m))
    out = _result(p, q, final, alt, null, settings, warnings)
    out["search"] = search_block
    staged = _sequential(
        runner, Request(STREAM_ALT, final, reps), Request(STREAM_NULL, final, reps), reps
    )
    if staged is not None:
        out["sequential"] = staged
    events = _events(runner, Request(STREAM_ALT, final, reps), reps)
    if events is not None:
        out["events"] = events
    return out


def _answer_effect(q, alpha, per_group, executor, progress, cancel, budget=None) -> dict:
    """The smallest effect whose simulated power at n reaches the target (common random numbers)."""
    name, axis = effect_setup(q)
    settings = SimSettings.of(q)
    reps = settings.replicates
    target = _target(q, "the effect")
    plans: dict[float, Plan] = {}

    def plan_at(x: float) -> Plan:
        if x not in plans:
            plans[x] = make_plan(with_effect(q, name, axis.value(x)), alpha)
        return plans[x]

    analytic = _analytic_effect(q, per_group, alpha)
    x0, source = math.nan, "default"
    if analytic is not None:
        x0, source = axis.sign * (analytic - axis.origin), "analytic"
        if axis.x_max == math.inf and axis.origin == 1.0 and axis.sign > 0 and 0 < analytic < 1:
            x0 = 1.0 / analytic - 1.0  # a ratio searched above 1: the mirror image on the log scale
    if not (0 < x0 < axis.x_max or (axis.inclusive and x0 == axis.x_max)):
        x0, source = (1.0 if not math.isfinite(axis.x_max) else axis.x_max / 2), "default"
    p0 = plan_at(x0)
    final = _check_per_group(p0, per_group, "the effect")
    runner = Runner(
        p0,
        settings.seed,
        settings.chunk_size,
        executor,
        progress,
        cancel,
        8 * settings.search_replicates + 3 * reps,
        full=reps,
        budget=budget,
    )

    def request(stream: int, x: float, r: int) -> Request:
        return Request(stream, final, r, plan_at(x), ("effect", x))

    def evaluate(xs: list[float], r: int, null_at: float | None) -> list[search.Estimate]:
        requests = [request(STREAM_ALT, x, r) for x in xs]
        if null_at is not None:
            requests.append(request(STREAM_NULL, null_at, reps))
        return runner.batch(requests)[: len(xs)]

    def unreachable() -> QuestionError:
        edge = axis.value(axis.x_max) if math.isfinite(axis.x_max) else None
        where = f" up to {edge:g}" if edge is not None else ""
        return QuestionError(
            "sample_size.per_group",
            f"no {name}{where} reaches simulated power {target:g} with {final} per group after "
            "adjustments; enroll more or lower the target power",
        )

    found = search.smallest_effect(
        evaluate,
        start=x0,
        x_max=axis.x_max,
        inclusive=axis.inclusive,
        target=target,
        rule=settings.decision_rule,
        search_replicates=settings.search_replicates,
        replicates=reps,
        unreachable=unreachable,
    )
    warnings = list(found.warnings)
    if source == "default":
        warnings.append(
            f"no analytic effect to start from; the search started at {name} = {axis.value(x0):g}"
        )
    if p0.design.simulation.direction_sign < 0 and axis.sign > 0:
        warnings.append(
            "hypothesis.higher_is_better is false, so shorter times to the event count as "
            f"better and the {name.replace('_', ' ')} was searched above 1"
        )
    p = plan_at(found.x)
    alt, null = runner.batch(
        [request(STREAM_ALT, found.x, reps), request(STREAM_NULL, found.x, reps)]
    )
    out = _result(p, q, final, alt, null, settings, warnings)
    out["effect"] = {
        "field": name,
        "value": axis.value(found.x),
        "bracket": sorted([axis.value(found.lo), axis.value(found.x)]),
        "analytic": analytic,
    }
    block = _search_block(
        axis.value(x0), source, target, settings, found, lambda x: {"effect": axis.value(x)}
    )
    block = {"field": name, **block, "tolerance": search.EFFECT_TOLERANCE}
    out["search"] = block
    staged = _sequential(
        runner, request(STREAM_ALT, found.x, reps), request(STREAM_NULL, found.x, reps), reps
    )
    if staged is not None:
        out["sequential"] = staged
    events = _events(runner, request(STREAM_ALT, found.x, reps), reps)
    if events is not None:
        out["events"] = events
    return out


def _analytic_effect(q: dict, per_group: list[int] | None, alpha: float) -> float | None:
    """The analytic effect at n, the search's starting point; None when the cell has none."""
    if not per_group:
        return None
    from .plan import design_of
    from .starting import analytic_effect

    value = analytic_effect(design_of(q), q, [float(n) for n in per_group], alpha)
    return value if value is not None and math.isfinite(value) else None


def _start(
    q: dict, p: Plan, alpha: float, start: list[float] | None, target: float
) -> tuple[float, str]:
    """Return the first-group size the search starts from and where it came from."""
    if start:
        return float(start[0]), "analytic"
    if q["simulation"].get("data") is None:
        from .starting import analytic_n

        n = analytic_n(p.design, q, alpha)
        if n is not None:
            return float(n[0]), "analytic"
    m = first_size(p, target)
    if m is not None and math.isfinite(m) and m > 0:
        return m, "normal approximation"
    return float(FALLBACK_FIRST), "default"
