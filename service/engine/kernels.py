"""The vectorized kernels, one per simulated analysis, in a table keyed by kernel name.

A cell's simulation model maps each analysis it simulates to a kernel name here. A kernel turns
``rows`` replicates of a chunk task into reject decisions (and small extras, e.g. event counts),
says how many random draws one replicate makes (the budget's unit) and how much memory a row
needs. ``summaries`` kernels draw summary statistics (normal means and variances, binomial
counts, sample correlations) instead of raw observations when the models allow it.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import stats

from . import cluster_sim, exact_binomial, manytoone, models, repeated, seqsim, vectests
from .chunks import BLOCK, STREAM_NULL, ChunkTask, Streams
from .errors import QuestionError

Run = Callable[[Streams, ChunkTask, int], tuple[np.ndarray, dict]]


def _raw_draws(task: ChunkTask, per_obs: list[int] | None = None) -> int:
    per_obs = per_obs or [models.variates(m) for m in task.models]
    return sum(-(-n // BLOCK) * BLOCK * k for n, k in zip(task.per_group, per_obs, strict=True))


def _raw_bytes(factor: int) -> Callable[[ChunkTask], int]:
    def row_bytes(task: ChunkTask) -> int:
        if task.summaries:
            return 8 * 12
        return 8 * factor * sum(-(-n // BLOCK) * BLOCK for n in task.per_group)

    return row_bytes


def _moment_draws(task: ChunkTask) -> int:
    return 2 * len(task.per_group) if task.summaries else _raw_draws(task)


@dataclass(frozen=True)
class Kernel:
    """One vectorized analysis: its run, its draws per replicate and its bytes per row."""

    run: Run
    draws: Callable[[ChunkTask], int]
    row_bytes: Callable[[ChunkTask], int]
    summaries: bool  # draws summary statistics when every model is normal (t and F tests)
    always_summaries: bool = False  # draws summaries whatever the models (counts, correlations)


def _center(model: dict) -> float:
    """A centring constant for one-pass moments when the mean dwarfs the spread, else 0."""
    m, v = models.moments(model)
    if m is None or v is None or v <= 0 or abs(m) < 100 * math.sqrt(v):
        return 0.0
    return m


def _moments(streams: Streams, task: ChunkTask, i: int, rows: int):
    model, n = task.models[i], task.per_group[i]
    if task.summaries:
        return streams.normal_summary(i, model, n, rows)
    return streams.raw_moments(i, model, n, rows, _center(model))


def _two_sample_t(equal_var: bool) -> Run:
    def run(streams: Streams, task: ChunkTask, rows: int):
        m1, v1 = _moments(streams, task, 0, rows)
        m2, v2 = _moments(streams, task, 1, rows)
        n1, n2 = task.per_group
        est, se, df = vectests.two_sample_t(m1, v1, n1, m2, v2, n2, equal_var=equal_var)
        return vectests.decide(est, se, df, task.alpha, task.rule), {}

    return run


def _one_sample_t(streams: Streams, task: ChunkTask, rows: int):
    m, v = _moments(streams, task, 0, rows)
    est, se, df = vectests.one_sample_t(m, v, task.per_group[0])
    return vectests.decide(est, se, df, task.alpha, task.rule), {}


def _rank_sum(streams: Streams, task: ChunkTask, rows: int):
    x = streams.raw(0, task.models[0], task.per_group[0], rows)
    y = streams.raw(1, task.models[1], task.per_group[1], rows)
    return vectests.decide(vectests.rank_sum_z(x, y), 1.0, None, task.alpha, task.rule), {}


def _po_rank_sum(streams: Streams, task: ChunkTask, rows: int):
    """Ordinal categories under proportional odds, tested by the tie-corrected rank-sum z.

    Each subject's uniform u is a latent logistic variable logit(u) + s (s = ln OR in the
    treatment group, the model's ``shift``); its category is the number of control cumulative
    probabilities below the control CDF at that latent value, u·e^s / (1 − u + u·e^s).
    """
    cum = np.asarray(task.settings["category_cumulative"], dtype=float)
    cats = []
    for i, (model, n) in enumerate(zip(task.models, task.per_group, strict=True)):
        base = {k: v for k, v in model.items() if k != "shift"}
        u = streams.raw(i, base, n, rows)
        e = math.exp(float(model.get("shift", 0.0)))
        level = u * e / (1.0 - u + u * e)
        cats.append(np.searchsorted(cum, level, side="left").astype(np.float64))
    z = vectests.rank_sum_z(cats[0], cats[1])
    return vectests.decide(z, 1.0, None, task.alpha, task.rule), {}


def _signed_rank(streams: Streams, task: ChunkTask, rows: int):
    d = streams.raw(0, task.models[0], task.per_group[0], rows)
    return vectests.decide(vectests.signed_rank_z(d), 1.0, None, task.alpha, task.rule), {}


def _f_test(streams: Streams, task: ChunkTask, rows: int):
    k = len(task.models)
    summaries = [_moments(streams, task, i, rows) for i in range(k)]
    f = vectests.f_oneway(task.per_group, [s[0] for s in summaries], [s[1] for s in summaries])
    crit = vectests.f_critical(task.alpha, k - 1, sum(task.per_group) - k)
    return f > crit, {}


def _kruskal_wallis(streams: Streams, task: ChunkTask, rows: int):
    groups = [
        streams.raw(i, m, n, rows)
        for i, (m, n) in enumerate(zip(task.models, task.per_group, strict=True))
    ]
    crit = vectests.chi2_critical(task.alpha, len(task.models) - 1)
    return vectests.kruskal_h(groups) > crit, {}


def _counts(streams: Streams, task: ChunkTask, rows: int):
    (n1, n2), (a1, a2) = task.per_group, task.models
    return streams.binomial(0, a1["p"], n1, rows), streams.binomial(1, a2["p"], n2, rows)


def _z(pooled: bool) -> Run:
    def run(streams: Streams, task: ChunkTask, rows: int):
        c1, c2 = _counts(streams, task, rows)
        n1, n2 = task.per_group
        est, se = vectests.two_proportion_z(
            c1,
            n1,
            c2,
            n2,
            pooled=pooled,
            continuity=bool(task.settings.get("continuity_correction", False)),
        )
        return vectests.decide(est, se, None, task.alpha, task.rule), {}

    return run


def _mn_score(streams: Streams, task: ChunkTask, rows: int):
    """The Miettinen-Nurminen score test against the margin on the task's scale (TOST for
    equivalence), from binomial counts."""
    from .designs.binary_scales import score_z

    c1, c2 = _counts(streams, task, rows)
    n1, n2 = task.per_group
    scale = task.settings.get("scale", "difference")
    rule = task.rule
    crit = float(stats.norm.isf(task.alpha))
    margin = float(rule["margin"])
    if rule.get("aim") == "equivalence":
        lower = score_z(c1, n1, c2, n2, scale, -margin, mn=True) > crit
        upper = score_z(c1, n1, c2, n2, scale, margin, mn=True) < -crit
        return lower & upper, {}
    return rule["direction"] * score_z(c1, n1, c2, n2, scale, margin, mn=True) > crit, {}


def _fisher(streams: Streams, task: ChunkTask, rows: int):
    c1, c2 = _counts(streams, task, rows)
    n1, n2 = task.per_group
    return vectests.fisher_reject(c1, n1, c2, n2, task.alpha, task.rule), {}


def _binomial_exact(streams: Streams, task: ChunkTask, rows: int):
    """One group's count against the reference rate: the exact binomial test's critical counts."""
    n, p0 = task.per_group[0], task.settings["p_null"]
    x = streams.binomial(0, task.models[0]["p"], n, rows)
    rule = task.rule
    tails = 2 if rule["alternative"] == "two-sided" else 1
    return exact_binomial.reject(x, n, p0, task.alpha, tails, rule["direction"]), {}


def _binomial_z(streams: Streams, task: ChunkTask, rows: int):
    """One group's count against the reference rate: z with the null variance p0(1 − p0)/n."""
    n, p0 = task.per_group[0], task.settings["p_null"]
    x = streams.binomial(0, task.models[0]["p"], n, rows)
    se = np.full(rows, math.sqrt(p0 * (1.0 - p0) / n))
    return vectests.decide(x / n - p0, se, None, task.alpha, task.rule), {}


def _two_stage(streams: Streams, task: ChunkTask, rows: int):
    """Simon's two stages: stage-1 and stage-2 response counts drawn from their own streams."""
    n, p = task.per_group[0], task.models[0]["p"]
    n1 = task.settings["stage1_size"]
    r1, r = task.settings["stage1_max_responses"], task.settings["max_responses"]
    x1 = streams.binomial(0, p, n1, rows)
    u = streams.gen(0, 1).random(rows)
    np.subtract(1.0, u, out=u)  # (0, 1], as Streams.binomial
    x2 = vectests.binomial_quantile(u, n - n1, p)
    return (x1 > r1) & (x1 + x2 > r), {}


def _discordant(streams: Streams, task: ChunkTask, rows: int):
    """Matched pairs: the discordant pairs D ~ Bin(n, ψ), then those favoring treatment given D."""
    model, n = task.models[0], task.per_group[0]
    p10, p01 = model["p_treatment_only"], model["p_control_only"]
    psi = p10 + p01
    d = streams.binomial(0, psi, n, rows).astype(np.int64)
    x = streams.gen(0, 1).binomial(d, p10 / psi if psi > 0 else 0.5).astype(np.int64)
    return x, d


def _mcnemar(streams: Streams, task: ChunkTask, rows: int):
    """McNemar's z = (b − c)/√(b + c) on the discordant pairs; no pair discordant: no rejection."""
    x, d = _discordant(streams, task, rows)
    est = (2 * x - d).astype(np.float64)
    se = np.sqrt(d.astype(np.float64))
    se[d == 0] = np.inf
    return vectests.decide(est, se, None, task.alpha, task.rule), {}


def _mcnemar_exact(streams: Streams, task: ChunkTask, rows: int):
    """The exact conditional test: x of d against Binomial(d, 1/2), critical counts per d."""
    x, d = _discordant(streams, task, rows)
    rule = task.rule
    tails = 2 if rule["alternative"] == "two-sided" else 1
    lo, hi = exact_binomial.critical_counts(
        np.arange(task.per_group[0] + 1), 0.5, task.alpha, tails, rule["direction"]
    )
    return ((x <= lo[d]) | (x >= hi[d])) & (d > 0), {}


def _pearson(streams: Streams, task: ChunkTask, rows: int):
    n = task.per_group[0]
    r = streams.correlation(task.models[0]["r"], n, rows)
    r_null = task.settings["r_null"]
    return vectests.correlation_reject(r, n, r_null, task.alpha, task.rule), {}


def _piecewise_times(streams: Streams, task: ChunkTask, i: int, rows: int) -> np.ndarray:
    """Event times of group i under piecewise-constant hazards, by inverting the cumulative
    hazard at a standard exponential draw. The groups' exponential scales give the base rates;
    the treatment group (i = 1) has the control's rate before the lag."""
    s, n = task.settings, task.per_group[i]
    base = [1.0 / m["scale"] for m in task.models]
    cuts, lag = s["cut_points"], s["treatment_lag"]
    starts = np.array(sorted({0.0, *cuts, *((lag,) if lag > 0 and i == 1 else ())}))
    shape = np.array(s["hazard_shape"])[np.searchsorted(cuts, starts, side="right")]
    rate = shape * (np.where(starts >= lag, base[i], base[0]) if i == 1 else base[0])
    cum = np.concatenate(([0.0], np.cumsum(np.diff(starts) * rate[:-1])))
    e = streams.raw(i, {"family": "exponential", "scale": 1.0}, n, rows, variate0=0)
    j = np.searchsorted(cum, e, side="right") - 1
    return starts[j] + (e - cum[j]) / rate[j]


def _piecewise_entry(streams: Streams, task: ChunkTask, i: int, rows: int) -> np.ndarray:
    """Entry times over [0, a] at piecewise-constant relative accrual rates (inverse CDF)."""
    s, n = task.settings, task.per_group[i]
    rates = np.array(s["accrual_rates"], dtype=float)
    edges = np.linspace(0.0, s["accrual"], len(rates) + 1)
    cdf = np.concatenate(([0.0], np.cumsum(rates) / rates.sum()))
    u = streams.raw(i, {"family": "uniform", "low": 0.0, "high": 1.0}, n, rows, variate0=1)
    return np.interp(u, cdf, edges)


def _profile_rows(streams: Streams, task: ChunkTask, rows: int):
    s = task.settings
    a, f = s["accrual"], s["follow_up"]
    losses = (s["loss_hazard"], s["loss_hazard_treatment"])
    times, events = [], []
    for i, n in enumerate(task.per_group):
        t = _piecewise_times(streams, task, i, rows)
        stop = (
            (a + f) - _piecewise_entry(streams, task, i, rows) if a > 0 else np.full((rows, n), f)
        )
        if losses[i] > 0:
            lost = {"family": "exponential", "scale": 1.0 / losses[i]}
            np.minimum(stop, streams.raw(i, lost, n, rows, variate0=2), out=stop)
        events.append(t <= stop)
        times.append(np.minimum(t, stop))
    return np.concatenate(times, axis=1), np.concatenate(events, axis=1)


def _event_rows(streams: Streams, task: ChunkTask, rows: int):
    s = task.settings
    if "hazard_shape" in s:
        return _profile_rows(streams, task, rows)
    a, f, loss = s["accrual"], s["follow_up"], s["loss_hazard"]
    times, events = [], []
    for i, (model, n) in enumerate(zip(task.models, task.per_group, strict=True)):
        t = streams.raw(i, model, n, rows, variate0=0)
        if a > 0:
            uniform = {"family": "uniform", "low": 0.0, "high": a}
            stop = (a + f) - streams.raw(i, uniform, n, rows, variate0=1)
        else:
            stop = np.full((rows, n), f)
        if loss > 0:
            lost = {"family": "exponential", "scale": 1.0 / loss}
            np.minimum(stop, streams.raw(i, lost, n, rows, variate0=2), out=stop)
        events.append(t <= stop)
        times.append(np.minimum(t, stop))
    return np.concatenate(times, axis=1), np.concatenate(events, axis=1)


def _logrank(streams: Streams, task: ChunkTask, rows: int):
    time, event = _event_rows(streams, task, rows)
    counted = {"events": int(event.sum())}
    if task.rule.get("aim") == "noninferiority":
        # Against a hazard-ratio margin: the score test of HR = margin (treatment at-risk
        # counts weighted by the margin); fewer treatment events than expected under the margin
        # show noninferiority, as lower hazards are better.
        excess, variance = vectests.logrank_parts(
            time, event, task.per_group[0], float(task.rule["margin"])
        )
        with np.errstate(divide="ignore", invalid="ignore"):
            z = excess / np.sqrt(variance)
        rule = {**task.rule, "aim": "superiority", "alternative": "one-sided", "direction": -1}
        return vectests.decide(z, 1.0, None, task.alpha, rule), counted
    z = vectests.logrank_z(time, event, task.per_group[0])
    return vectests.decide(z, 1.0, None, task.alpha, task.rule), counted


def _logrank_draws(task: ChunkTask) -> int:
    s = task.settings
    lost = s["loss_hazard"] > 0 or s.get("loss_hazard_treatment", 0) > 0
    per_obs = 1 + (s["accrual"] > 0) + lost
    return _raw_draws(task, [per_obs] * len(task.per_group))


@lru_cache(maxsize=64)
def _many_critical(analysis: str, alpha: float, per_group: tuple[int, ...], tails: int) -> float:
    df = float(sum(per_group) - len(per_group))
    if analysis == "dunnett":
        return manytoone.dunnett_critical(alpha, list(per_group), df, tails)
    return manytoone.bonferroni_critical(alpha, len(per_group) - 1, df, tails)


def _many_to_one(streams: Streams, task: ChunkTask, rows: int):
    """k treatment groups against the control: t statistics with the pooled SD, then Dunnett,
    Bonferroni, Holm or Hochberg; success is any or all treatment groups significant (the
    effect-removed stream always asks "any": the familywise error)."""
    g = len(task.models)
    summaries = [_moments(streams, task, i, rows) for i in range(g)]
    n = np.array(task.per_group, dtype=float)
    df = float(n.sum() - g)
    pooled = sum((n[i] - 1.0) * summaries[i][1] for i in range(g)) / df
    means = np.stack([s[0] for s in summaries[1:]], axis=1)  # (rows, k)
    se = np.sqrt(pooled[:, None] * (1.0 / n[1:] + 1.0 / n[0]))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (means - summaries[0][0][:, None]) / se
    two = task.rule["alternative"] == "two-sided"
    stat = np.abs(t) if two else task.rule["direction"] * t
    tails = 2 if two else 1
    goal = "any_treatment" if task.stream == STREAM_NULL else task.settings["power_goal"]
    if task.analysis in ("dunnett", "bonferroni"):
        c = _many_critical(task.analysis, task.alpha, tuple(task.per_group), tails)
        hit = stat > c
        return (hit.any(axis=1) if goal == "any_treatment" else hit.all(axis=1)), {}
    p = tails * stats.t.sf(stat, df)
    return manytoone.stepwise_success(p, task.alpha, task.analysis, goal), {}


@lru_cache(maxsize=64)
def _many_critical_normal(
    analysis: str, alpha: float, per_group: tuple[int, ...], tails: int
) -> float:
    if analysis == "dunnett":
        return manytoone.dunnett_critical(alpha, list(per_group), manytoone.NORMAL_DF, tails)
    return float(stats.norm.isf(alpha / (tails * (len(per_group) - 1))))


def _many_to_one_binary(streams: Streams, task: ChunkTask, rows: int):
    """k treatment groups against the control, binary outcome: each pair's pooled z test from
    binomial counts, then the Dunnett-type (multivariate normal), Bonferroni, Holm or Hochberg
    decision; success is any or all treatment groups significant (the effect-removed stream
    always asks "any": the familywise error)."""
    n = task.per_group
    counts = [streams.binomial(i, m["p"], n[i], rows) for i, m in enumerate(task.models)]
    p0 = counts[0] / n[0]
    zs = []
    for i in range(1, len(n)):
        pbar = (counts[0] + counts[i]) / (n[0] + n[i])
        se = np.sqrt(pbar * (1.0 - pbar) * (1.0 / n[0] + 1.0 / n[i]))
        with np.errstate(divide="ignore", invalid="ignore"):
            zs.append((counts[i] / n[i] - p0) / se)
    z = np.nan_to_num(np.stack(zs, axis=1), nan=0.0)  # no events (or all) anywhere: no signal
    two = task.rule["alternative"] == "two-sided"
    stat = np.abs(z) if two else task.rule["direction"] * z
    tails = 2 if two else 1
    goal = "any_treatment" if task.stream == STREAM_NULL else task.settings["power_goal"]
    if task.analysis in ("dunnett", "bonferroni"):
        c = _many_critical_normal(task.analysis, task.alpha, tuple(n), tails)
        hit = stat > c
        return (hit.any(axis=1) if goal == "any_treatment" else hit.all(axis=1)), {}
    p = tails * stats.norm.sf(stat)
    return manytoone.stepwise_success(p, task.alpha, task.analysis, goal), {}


_STANDARD = {"family": "normal", "mean": 0.0, "sd": 1.0}
_UNIFORM = {"family": "uniform", "low": 0.0, "high": 1.0}


def _repeated_group(streams: Streams, task: ChunkTask, i: int, rows: int):
    """One group's GLS estimate (rows, p) and information (rows, p, p), the covariance known.

    Visit j of every subject is variate j (nested subject blocks, as raw draws are); variate v
    draws the dropout: a subject is seen at the first K visits, K geometric in the retention.
    """
    s, n, model = task.settings, task.per_group[i], task.models[i]
    v, analysis = s["visits"], task.analysis
    z = np.stack([streams.raw(i, _STANDARD, n, rows, variate0=j) for j in range(v)], axis=2)
    chol = np.linalg.cholesky(repeated.correlation(s["structure"], s["rho"], v))
    y = s["sd"] * (z @ chol.T)  # (rows, n, v) with the visits' correlation
    x = repeated.design_matrix(analysis, v)
    y += (model["mean"] + model.get("shift", 0.0)) * x[:, -1]  # level, or slope × time
    if s["retention"] < 1.0:
        u = streams.raw(i, _UNIFORM, n, rows, variate0=v)
        seen = 1 + np.floor(np.log(np.maximum(u, 1e-300)) / np.log(s["retention"]))
        seen = np.minimum(seen, v).astype(int)
    else:
        seen = np.full((rows, n), v)
    weights, infos = repeated.pattern_weights(s["structure"], s["rho"], v, analysis)
    p = x.shape[1]
    total = np.zeros((rows, p))
    info = np.zeros((rows, p, p))
    for k in range(1, v + 1):  # one pass per dropout pattern, not per replicate
        mask = seen == k
        total += np.einsum("rn,rnv,vp->rp", mask, y, weights[k - 1])
        info += mask.sum(axis=1)[:, None, None] * infos[k - 1]
    # A replicate where no subject reached a second visit cannot estimate a slope: it counts
    # as not rejecting (infinite variance) instead of failing the whole simulation.
    lost = np.linalg.det(info) <= 1e-12
    if lost.any():
        info[lost] = np.eye(p)
        total[lost] = 0.0
    est = np.linalg.solve(info, total[:, :, None])[:, -1, 0]
    var = np.linalg.inv(info)[:, -1, -1]
    var[lost] = np.inf
    return est, var


def _repeated_gls(streams: Streams, task: ChunkTask, rows: int):
    est0, var0 = _repeated_group(streams, task, 0, rows)
    est1, var1 = _repeated_group(streams, task, 1, rows)
    se = task.settings["sd"] * np.sqrt(var0 + var1)
    return vectests.decide(est1 - est0, se, None, task.alpha, task.rule), {}


def _repeated_draws(task: ChunkTask) -> int:
    return _raw_draws(task, [task.settings["visits"] + 1] * len(task.per_group))


def _crossover_t(streams: Streams, task: ChunkTask, rows: int):
    """2×2 crossover: subjects' own levels, a period effect and within-subject errors are drawn;
    the half period differences are compared between the sequences by the pooled t (N − 2 df).

    Group 0 takes the reference first, group 1 the treatment first; a group's model holds that
    treatment's mean and the within-subject SD.
    """
    s = task.settings
    reference, treatment = task.models
    mean = [models.center(reference), models.center(treatment)]  # with a null model's shift
    halves = []
    for i, (first, second) in enumerate(((0, 1), (1, 0))):
        n = task.per_group[i]
        noise = {"family": "normal", "mean": 0.0, "sd": task.models[first]["sd"]}
        y1 = streams.raw(i, noise, n, rows, variate0=0) + mean[first]
        y2 = streams.raw(i, noise, n, rows, variate0=1) + mean[second] + s["period_effect"]
        if s["sd_between"] > 0:
            subject = streams.raw(
                i, {"family": "normal", "mean": 0.0, "sd": s["sd_between"]}, n, rows, variate0=2
            )
            y1 += subject
            y2 += subject
        halves.append(vectests.row_moments(0.5 * (y1 - y2)))
    (m_rt, v_rt), (m_tr, v_tr) = halves
    n_rt, n_tr = task.per_group
    # treatment − reference = mean half difference of TR − that of RT
    est, se, df = vectests.two_sample_t(m_rt, v_rt, n_rt, m_tr, v_tr, n_tr, equal_var=True)
    return vectests.decide(est, se, df, task.alpha, task.rule), {}


def ancova_data(streams: Streams, task: ChunkTask, rows: int) -> list[tuple]:
    """Per group, (baseline, outcome) arrays of shape (rows, n).

    Each subject's baseline and outcome are standard bivariate normal with correlation ρ, scaled
    by the group's SD; the outcome is moved to the group's mean.
    """
    rho = task.settings["baseline_correlation"]
    keep = math.sqrt(1.0 - rho * rho)
    out = []
    for i, (model, n) in enumerate(zip(task.models, task.per_group, strict=True)):
        x = streams.raw(i, _STANDARD, n, rows, variate0=1)
        y = streams.raw(i, _STANDARD, n, rows, variate0=0)
        y *= keep
        y += rho * x
        y *= model["sd"]
        y += models.center(model)
        x *= model["sd"]
        out.append((x, y))
    return out


def _ancova(streams: Streams, task: ChunkTask, rows: int):
    """Baseline-adjusted comparison: the least-squares fit of every replicate at once."""
    (x1, y1), (x2, y2) = ancova_data(streams, task, rows)
    est, se, df = vectests.ancova_t(x1, y1, x2, y2)
    return vectests.decide(est, se, df, task.alpha, task.rule), {}


def _partial_f(streams: Streams, task: ChunkTask, rows: int):
    """Linear regression: the partial F test of the tested predictors, every replicate at once.

    Predictors are independent standard normal (variate j for predictor j: the other predictors
    first, then the tested ones), the error standard normal (the last variate); each tested
    coefficient is √(f²/u), the others 0 (the partial F test does not depend on them).
    """
    m, n = task.models[0], task.per_group[0]
    u, k = int(m["tested"]), int(m["other"])
    p = u + k
    df2 = n - p - 1
    if df2 < 1:
        return np.zeros(rows, dtype=bool), {}
    x = np.empty((rows, n, p + 1))
    x[:, :, 0] = 1.0
    for j in range(p):
        x[:, :, j + 1] = streams.raw(0, _STANDARD, n, rows, variate0=j)
    y = streams.raw(0, _STANDARD, n, rows, variate0=p)
    if m["f_squared"] > 0:
        y += math.sqrt(m["f_squared"] / u) * x[:, :, k + 1 :].sum(axis=2)
    rss_full = vectests.residual_ss(x, y)
    rss_reduced = vectests.residual_ss(x[:, :, : k + 1], y)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = ((rss_reduced - rss_full) / u) / (rss_full / df2)
    return f > vectests.f_critical(task.alpha, u, df2), {}


def _auc_z(streams: Streams, task: ChunkTask, rows: int):
    """The Mann–Whitney AUC of cases (group 1) over controls (group 0) per replicate, by ranks,
    tested against the null AUC with the Hanley–McNeil standard error at the null value."""
    n0, n1 = task.per_group
    x = streams.raw(0, task.models[0], n0, rows)
    y = streams.raw(1, task.models[1], n1, rows)
    auc = vectests.mann_whitney_auc(x, y)
    a0 = task.settings["auc_null"]
    q1, q2 = a0 / (2.0 - a0), 2.0 * a0 * a0 / (1.0 + a0)
    var0 = (a0 * (1 - a0) + (n1 - 1) * (q1 - a0 * a0) + (n0 - 1) * (q2 - a0 * a0)) / (n0 * n1)
    return vectests.decide(auc - a0, math.sqrt(var0), None, task.alpha, task.rule), {}


def _logistic_wald(streams: Streams, task: ChunkTask, rows: int):
    """Logistic regression: the Wald z of the tested covariate, every replicate fitted at once.

    The covariate is standard normal (variate 0) or Bernoulli(prevalence) from a uniform; with
    a correlation ρ an other covariate ρ·x_std + √(1 − ρ²)·N(0, 1) (variate 1) joins the model;
    the outcome is a Bernoulli draw (variate 2) at logit⁻¹(intercept + β·x). Newton–Raphson from
    the null fit, a fixed number of steps for every row; a row whose information is singular
    (separation, no events) does not reject.
    """
    m, n = task.models[0], task.per_group[0]
    rho = float(m.get("correlation") or 0.0)
    if m["covariate"] == "binary":
        b = m["prevalence"]
        x = (streams.raw(0, _UNIFORM, n, rows, variate0=0) < b).astype(float)
        std = (x - b) / math.sqrt(b * (1 - b))
    else:
        x = streams.raw(0, _STANDARD, n, rows, variate0=0)
        std = x
    columns = [np.ones((rows, n)), x]
    if rho > 0:
        noise = streams.raw(0, _STANDARD, n, rows, variate0=1)
        columns.append(rho * std + math.sqrt(1 - rho * rho) * noise)
    design = np.stack(columns, axis=2)  # (rows, n, p)
    eta = m["intercept"] + m["log_odds_ratio"] * x
    y = (streams.raw(0, _UNIFORM, n, rows, variate0=2) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    p = design.shape[2]
    coef = np.zeros((rows, p))
    mean = np.clip(y.mean(axis=1), 1e-6, 1 - 1e-6)
    coef[:, 0] = np.log(mean / (1 - mean))
    eye = np.eye(p)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        for _ in range(_NEWTON_STEPS):
            lin = np.clip(np.einsum("rnp,rp->rn", design, coef), -30.0, 30.0)
            prob = 1.0 / (1.0 + np.exp(-lin))
            w = prob * (1 - prob)
            info = np.einsum("rni,rn,rnj->rij", design, w, design)
            score = np.einsum("rnp,rn->rp", design, y - prob)
            ok = np.abs(np.linalg.det(info)) > 1e-12
            info[~ok] = eye
            score[~ok] = 0.0
            coef += np.linalg.solve(info, score[:, :, None])[:, :, 0]
        lin = np.clip(np.einsum("rnp,rp->rn", design, coef), -30.0, 30.0)
        prob = 1.0 / (1.0 + np.exp(-lin))
        info = np.einsum("rni,rn,rnj->rij", design, prob * (1 - prob), design)
        ok = np.abs(np.linalg.det(info)) > 1e-12
        info[~ok] = eye
        var = np.linalg.inv(info)[:, 1, 1]
        se = np.where(ok & np.isfinite(coef[:, 1]), np.sqrt(var), np.inf)
    return vectests.decide(coef[:, 1], se, None, task.alpha, task.rule), {}


_NEWTON_STEPS = 12


def _cox_wald(streams: Streams, task: ChunkTask, rows: int):
    """Cox regression: the Wald z of the tested covariate from the partial likelihood (Breslow,
    continuous times: no ties), every replicate fitted at once by Newton–Raphson.

    The covariate is normal with the stated SD (variate 0) or a factor with the stated
    prevalence; with a correlation ρ an other covariate (variate 1) joins the model; event times
    are exponential with hazard exp(β·x) (variate 2), censored at the model's follow-up time.
    """
    m, n = task.models[0], task.per_group[0]
    rho = float(m.get("correlation") or 0.0)
    if m["covariate"] == "binary":
        b = m["prevalence"]
        x = (streams.raw(0, _UNIFORM, n, rows, variate0=0) < b).astype(float)
        std = (x - b) / math.sqrt(b * (1 - b))
    else:
        std = streams.raw(0, _STANDARD, n, rows, variate0=0)
        x = m["sd"] * std
    columns = [x]
    if rho > 0:
        noise = streams.raw(0, _STANDARD, n, rows, variate0=1)
        columns.append(rho * std + math.sqrt(1 - rho * rho) * noise)
    e = streams.raw(0, {"family": "exponential", "scale": 1.0}, n, rows, variate0=2)
    t = e * np.exp(-m["log_hazard_ratio"] * x)
    event = t <= m["censor_time"]
    t = np.minimum(t, m["censor_time"])
    order = np.argsort(t, axis=1)
    design = np.take_along_axis(np.stack(columns, axis=2), order[:, :, None], axis=1)
    event = np.take_along_axis(event, order, axis=1).astype(float)
    p = design.shape[2]
    coef = np.zeros((rows, p))
    eye = np.eye(p)
    outer = np.einsum("rni,rnj->rnij", design, design)

    def parts(c):
        w = np.exp(np.clip(np.einsum("rnp,rp->rn", design, c), -50.0, 50.0))
        s0 = np.cumsum(w[:, ::-1], axis=1)[:, ::-1]
        s1 = np.cumsum((design * w[:, :, None])[:, ::-1], axis=1)[:, ::-1]
        s2 = np.cumsum((outer * w[:, :, None, None])[:, ::-1], axis=1)[:, ::-1]
        mean = s1 / s0[:, :, None]
        score = np.einsum("rn,rnp->rp", event, design - mean)
        info = np.einsum(
            "rn,rnij->rij",
            event,
            s2 / s0[:, :, None, None] - np.einsum("rni,rnj->rnij", mean, mean),
        )
        ok = np.abs(np.linalg.det(info)) > 1e-10
        info[~ok] = eye
        score[~ok] = 0.0
        return score, info, ok

    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        for _ in range(_NEWTON_STEPS):
            score, info, ok = parts(coef)
            coef += np.linalg.solve(info, score[:, :, None])[:, :, 0]
        _, info, ok = parts(coef)
        var = np.linalg.inv(info)[:, 0, 0]
        se = np.where(ok & np.isfinite(coef[:, 0]), np.sqrt(var), np.inf)
    # the outcome scale's "higher" is longer times: −β̂ (as the log-rank statistic's sign)
    reject = vectests.decide(-coef[:, 0], se, None, task.alpha, task.rule)
    return reject, {"events": int(event.sum())}


def _cluster_t(streams: Streams, task: ChunkTask, rows: int):
    return cluster_sim.reject(streams, task, rows)


def _count_group(streams: Streams, task: ChunkTask, i: int, rows: int):
    """Group i's counts (rows, n) and follow-up (rows, n), or the one follow-up as a float.

    Per column block: variate 1 draws each subject's follow-up uniform on [F, F + A] (when
    A > 0), variate 2 a gamma frailty of mean 1 and variance κ (when κ > 0), variate 0 the
    Poisson count at the group's mean count × follow-up / mean follow-up × frailty: a negative
    binomial count with variance μ + κμ².
    """
    s, n, model = task.settings, task.per_group[i], task.models[i]
    f, a, kappa = s["follow_up"], s["accrual"], s["overdispersion"]
    mean_t = f + a / 2.0
    y = np.empty((rows, n))
    t = np.empty((rows, n)) if a > 0 else f
    for b in range(-(-n // BLOCK)):
        lo, width = b * BLOCK, min(BLOCK, n - b * BLOCK)
        mu = np.full((rows, BLOCK), float(model["mean"]))
        if a > 0:
            tb = streams.gen(i, 1, b).random((rows, BLOCK))
            tb *= a
            tb += f
            mu *= tb / mean_t
            t[:, lo : lo + width] = tb[:, :width]
        if kappa > 0:
            frailty = streams.gen(i, 2, b).standard_gamma(1.0 / kappa, (rows, BLOCK))
            mu *= frailty * kappa
        y[:, lo : lo + width] = streams.gen(i, 0, b).poisson(mu)[:, :width]
    return y, t


def _rate_wald(streams: Streams, task: ChunkTask, rows: int):
    """The Wald test of the log rate ratio: Poisson variance, or negative binomial variance with
    the dispersion estimated by the method of moments (analysis negative_binomial_wald)."""
    y0, t0 = _count_group(streams, task, 0, rows)
    y1, t1 = _count_group(streams, task, 1, rows)
    est, se = vectests.rate_ratio_wald(
        y0, t0, y1, t1, estimate_dispersion=task.analysis == "negative_binomial_wald"
    )
    return vectests.decide(est, se, None, task.alpha, task.rule), {}


def _rate_draws(task: ChunkTask) -> int:
    s = task.settings
    per_obs = 1 + (s["accrual"] > 0) + (s["overdispersion"] > 0)
    return _raw_draws(task, [per_obs] * len(task.per_group))


KERNELS: dict[str, Kernel] = {
    "t_pooled": Kernel(_two_sample_t(True), _moment_draws, _raw_bytes(4), summaries=True),
    "t_welch": Kernel(_two_sample_t(False), _moment_draws, _raw_bytes(4), summaries=True),
    "t_one_sample": Kernel(_one_sample_t, _moment_draws, _raw_bytes(4), summaries=True),
    "f_test": Kernel(_f_test, _moment_draws, _raw_bytes(4), summaries=True),
    "rank_sum": Kernel(_rank_sum, _raw_draws, _raw_bytes(10), summaries=False),
    "po_rank_sum": Kernel(_po_rank_sum, _raw_draws, _raw_bytes(10), summaries=False),
    "signed_rank": Kernel(_signed_rank, _raw_draws, _raw_bytes(10), summaries=False),
    "kruskal_wallis": Kernel(_kruskal_wallis, _raw_draws, _raw_bytes(10), summaries=False),
    "z_pooled": Kernel(
        _z(True), lambda t: len(t.per_group), _raw_bytes(10), True, always_summaries=True
    ),
    "z_unpooled": Kernel(
        _z(False), lambda t: len(t.per_group), _raw_bytes(10), True, always_summaries=True
    ),
    "mn_score": Kernel(
        _mn_score, lambda t: len(t.per_group), _raw_bytes(10), True, always_summaries=True
    ),
    "fisher_exact": Kernel(
        _fisher, lambda t: len(t.per_group), _raw_bytes(10), True, always_summaries=True
    ),
    "binomial_exact": Kernel(_binomial_exact, lambda t: 1, _raw_bytes(10), True, True),
    "binomial_z": Kernel(_binomial_z, lambda t: 1, _raw_bytes(10), True, True),
    "two_stage": Kernel(_two_stage, lambda t: 2, _raw_bytes(10), True, True),
    "mcnemar": Kernel(_mcnemar, lambda t: 2, _raw_bytes(10), True, True),
    "mcnemar_exact": Kernel(_mcnemar_exact, lambda t: 2, _raw_bytes(10), True, True),
    "pearson": Kernel(_pearson, lambda t: 3, _raw_bytes(10), True, always_summaries=True),
    "logrank": Kernel(_logrank, _logrank_draws, _raw_bytes(14), summaries=False),
    "many_to_one": Kernel(_many_to_one, _moment_draws, _raw_bytes(4), summaries=True),
    "many_to_one_binary": Kernel(
        _many_to_one_binary,
        lambda t: len(t.per_group),
        _raw_bytes(10),
        True,
        always_summaries=True,
    ),
    "repeated_gls": Kernel(_repeated_gls, _repeated_draws, _raw_bytes(60), summaries=False),
    "ancova": Kernel(
        _ancova, lambda t: _raw_draws(t, [2] * len(t.per_group)), _raw_bytes(8), False
    ),
    "crossover_t": Kernel(
        _crossover_t, lambda t: _raw_draws(t, [3] * len(t.per_group)), _raw_bytes(8), False
    ),
    # interim analyses: the base kernel's statistic at every look (seqsim.py)
    "sequential": Kernel(seqsim.run, seqsim.draws, seqsim.row_bytes, summaries=False),
    # per_group counts clusters: a size, a cluster effect and a mean per cluster
    "partial_f": Kernel(
        _partial_f,
        lambda t: _raw_draws(t, [t.models[0]["tested"] + t.models[0]["other"] + 1]),
        lambda t: 8 * 3 * (t.models[0]["tested"] + t.models[0]["other"] + 2) * t.per_group[0],
        False,
    ),
    "auc_z": Kernel(_auc_z, _raw_draws, _raw_bytes(10), summaries=False),
    "logistic_wald": Kernel(
        _logistic_wald,
        lambda t: _raw_draws(t, [2 + (float(t.models[0].get("correlation") or 0) > 0)]),
        _raw_bytes(12),
        False,
    ),
    "cox_wald": Kernel(
        _cox_wald,
        lambda t: _raw_draws(t, [2 + (float(t.models[0].get("correlation") or 0) > 0)]),
        _raw_bytes(16),
        False,
    ),
    "cluster_t": Kernel(
        _cluster_t, lambda t: 3 * sum(t.per_group), _raw_bytes(10), True, always_summaries=True
    ),
    "rate_wald": Kernel(_rate_wald, _rate_draws, _raw_bytes(8), summaries=False),
}


def kernel(name: str) -> Kernel:
    """Return the kernel called ``name``; QuestionError naming the task field when unknown."""
    try:
        return KERNELS[name]
    except KeyError:
        raise QuestionError(
            "task.kernel", f"unknown kernel {name!r}; allowed: {', '.join(KERNELS)}"
        ) from None
