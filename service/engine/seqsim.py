"""The group-sequential test on simulated trials: every look of every replicate at once.

A simulated question with an ``interim`` block runs the kernel ``sequential``: each replicate's
data are drawn once at the maximum size, and the test statistic is computed at every look on
the cumulative data (the first n_k subjects of each group: the draws are nested, so look k
sees a prefix of look k + 1). Each look's statistic is put on the z scale through its own
p-value, z = Φ⁻¹(1 − p/sides) (the t test's p from its t distribution, the z tests' from the
normal, Fisher's exact p as it is), and compared with the efficacy boundaries that
sequential.py computes by numerical integration. A replicate stops at its first crossing; the
trial rejects when any look crosses. Means and sums of squares at the looks come from
cumulative sums over the observations, proportions from binomial counts drawn per stage, so
the cost is one pass over the data plus K small statistics per replicate: no per-replicate
loop. Pure: numpy and scipy only.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtri

from . import vectests
from .chunks import ChunkTask, Streams
from .designs.interim import SIMULATED_KERNELS

BASES = SIMULATED_KERNELS  # the base kernels whose statistic is recomputed at every look
_BINARY = ("z_pooled", "z_unpooled", "fisher_exact")


def look_sizes(n: int, fractions: list[float]) -> list[int]:
    """The analyzed size of a group at each look: ⌈n·t_k⌉ (as the analytic block rounds)."""
    return [max(1, min(n, math.ceil(n * t - 1e-9))) for t in fractions]


def _center(model: dict) -> float:
    from .kernels import _center as center

    return center(model)


def _cumulative_moments(x: np.ndarray, sizes: list[int], center: float):
    """Per row and look, (mean, unbiased variance) of the first n_k columns; shape (rows, K)."""
    if center:
        x = x - center
    # stage sums between looks (a look may repeat a size when n is small), then running totals
    starts = np.concatenate(([0], np.asarray(sizes[:-1])))
    empty = starts >= np.asarray(sizes)
    s = np.add.reduceat(x, starts, axis=1)
    ss = np.add.reduceat(x * x, starts, axis=1)
    s[:, empty], ss[:, empty] = 0.0, 0.0
    s, ss = np.cumsum(s, axis=1), np.cumsum(ss, axis=1)
    n = np.asarray(sizes, dtype=float)
    mean = s / n
    with np.errstate(divide="ignore", invalid="ignore"):
        var = np.maximum((ss - s * mean) / (n - 1.0), 0.0)
    return mean + center, var


def _z_scale(p: np.ndarray, sides: int) -> np.ndarray:
    """A p-value on the z scale of the boundaries: Φ⁻¹(1 − p/sides) (|Z| when two-sided)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return -ndtri(np.clip(p, 0.0, 1.0) / sides)


def _raw(streams: Streams, task: ChunkTask, i: int, rows: int) -> np.ndarray:
    return streams.raw(i, task.models[i], task.per_group[i], rows)


def _means(streams: Streams, task: ChunkTask, rows: int, looks: list[list[int]], base: str):
    rule = task.rule
    out = []
    if base == "t_one_sample":
        m, v = _cumulative_moments(_raw(streams, task, 0, rows), looks[0], _center(task.models[0]))
        for k, n in enumerate(looks[0]):
            est, se, df = vectests.one_sample_t(m[:, k], v[:, k], n)
            out.append(vectests.pvalue(est, se, df, rule))
        return out
    m1, v1 = _cumulative_moments(_raw(streams, task, 0, rows), looks[0], _center(task.models[0]))
    m2, v2 = _cumulative_moments(_raw(streams, task, 1, rows), looks[1], _center(task.models[1]))
    for k, (n1, n2) in enumerate(zip(*looks, strict=True)):
        est, se, df = vectests.two_sample_t(
            m1[:, k], v1[:, k], n1, m2[:, k], v2[:, k], n2, equal_var=base == "t_pooled"
        )
        out.append(vectests.pvalue(est, se, df, rule))
    return out


def _ranks(streams: Streams, task: ChunkTask, rows: int, looks: list[list[int]], base: str):
    rule, out = task.rule, []
    if base == "signed_rank":
        d = _raw(streams, task, 0, rows)
        for n in looks[0]:
            z = vectests.signed_rank_z(d[:, :n])
            out.append(vectests.pvalue(z, 1.0, None, rule))
        return out
    x, y = _raw(streams, task, 0, rows), _raw(streams, task, 1, rows)
    for n1, n2 in zip(*looks, strict=True):
        z = vectests.rank_sum_z(x[:, :n1], y[:, :n2])
        out.append(vectests.pvalue(z, 1.0, None, rule))
    return out


def _stage_counts(streams: Streams, task: ChunkTask, i: int, rows: int, sizes: list[int]):
    """Cumulative binomial counts of group i at the looks: one binomial per stage (variate k)."""
    p = task.models[i]["p"]
    total, out, before = np.zeros(rows), [], 0
    for k, n in enumerate(sizes):
        if n > before:
            u = streams.gen(i, k).random(rows)
            np.subtract(1.0, u, out=u)  # (0, 1]
            total = total + vectests.binomial_quantile(u, n - before, p)
        out.append(total)
        before = n
    return out


def _proportions(streams: Streams, task: ChunkTask, rows: int, looks: list[list[int]], base: str):
    rule, out = task.rule, []
    c1 = _stage_counts(streams, task, 0, rows, looks[0])
    c2 = _stage_counts(streams, task, 1, rows, looks[1])
    continuity = bool(task.settings.get("continuity_correction", False))
    for k, (n1, n2) in enumerate(zip(*looks, strict=True)):
        if base == "fisher_exact":
            out.append(vectests.fisher_pvalues(c1[k], n1, c2[k], n2, rule))
            continue
        est, se = vectests.two_proportion_z(
            c1[k], n1, c2[k], n2, pooled=base == "z_pooled", continuity=continuity
        )
        out.append(vectests.pvalue(est, se, None, rule))
    return out


def statistics(streams: Streams, task: ChunkTask, rows: int) -> np.ndarray:
    """The z-scale statistic of every replicate at every look, shape (rows, K)."""
    s = task.settings["interim"]
    base, fractions = s["kernel"], s["fractions"]
    looks = [look_sizes(n, fractions) for n in task.per_group]
    if base in _BINARY:
        p = _proportions(streams, task, rows, looks, base)
    elif base in ("rank_sum", "signed_rank"):
        p = _ranks(streams, task, rows, looks, base)
    else:
        p = _means(streams, task, rows, looks, base)
    return _z_scale(np.stack(p, axis=1), int(s["sides"]))


def run(streams: Streams, task: ChunkTask, rows: int) -> tuple[np.ndarray, dict]:
    """Reject decisions (any look crossed) and extras: stops per look, subjects at stopping."""
    s = task.settings["interim"]
    z = statistics(streams, task, rows)
    upper = np.asarray(s["upper"], dtype=float)
    with np.errstate(invalid="ignore"):
        cross = z >= upper  # NaN (no variance yet) never crosses
    reject = cross.any(axis=1)
    first = np.where(reject, cross.argmax(axis=1), len(upper) - 1)
    counts = np.bincount(first[reject], minlength=len(upper))
    totals = np.sum([look_sizes(n, s["fractions"]) for n in task.per_group], axis=0)
    extras = {f"stop_look_{k + 1}": int(c) for k, c in enumerate(counts)}
    extras["subjects_at_stop"] = int(totals[first].sum())
    return reject, extras


def draws(task: ChunkTask) -> int:
    """Random draws per replicate: the raw observations, or one uniform per group and stage."""
    from .kernels import _raw_draws

    base = task.settings["interim"]["kernel"]
    if base in _BINARY:
        return len(task.per_group) * len(task.settings["interim"]["fractions"])
    return _raw_draws(task)


def row_bytes(task: ChunkTask) -> int:
    """Working bytes per replicate: the raw data and their cumulative sums (or small counts)."""
    from .chunks import BLOCK

    if task.settings["interim"]["kernel"] in _BINARY:
        return 8 * 16 * len(task.settings["interim"]["fractions"])
    return 8 * 12 * sum(-(-n // BLOCK) * BLOCK for n in task.per_group)
