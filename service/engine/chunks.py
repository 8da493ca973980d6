"""Chunk tasks: the unit of simulation work, plain JSON in and out, runnable by any process.

Chunk ``i`` of stream ``s`` draws group ``a``'s variate ``v`` from
``PCG64(SeedSequence(seed, spawn_key=(s, i, a, v, b)))``; raw observations come in column blocks
``b`` of 32, drawn row-major, so the first n columns are the same for every candidate n (common
random numbers, nested samples) and rows may be drawn in any sub-batch size. Stream 0 is the data
model as posed, stream 1 the same model with the effect removed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import models, vectests
from .errors import QuestionError

BLOCK = 32
BIT_GENERATOR = "PCG64"
SEED_SCHEME = (
    "numpy PCG64 seeded by SeedSequence(seed, spawn_key=(stream, chunk, group, variate, block)); "
    "stream 0 = data model as posed, 1 = effect removed; chunk i holds replicates "
    "[i*chunk_size, (i+1)*chunk_size); raw observations in column blocks of 32 (block 0 for "
    "summary statistics), each drawn row-major; groups in question order"
)
MEMORY_BYTES = 48 * 2**20  # working arrays per sub-batch; peak stays well under 256 MB
CACHE_ROWS = 4096  # raw sub-batches of a few MB stay in cache: measured ~10% faster than larger
STREAM_ALT, STREAM_NULL = 0, 1

_REQUIRED = (
    "kernel",
    "models",
    "per_group",
    "alpha",
    "rule",
    "seed",
    "stream",
    "chunk",
    "replicates",
)


@dataclass(frozen=True)
class ChunkTask:
    """Everything ``run_chunk`` needs, nothing else; ``to_dict`` is its JSON form."""

    kernel: str
    analysis: str
    models: list[dict]
    per_group: list[int]
    alpha: float
    rule: dict
    settings: dict
    summaries: bool
    seed: int
    stream: int
    chunk: int
    chunk_size: int
    replicates: int
    max_rows: int | None = field(default=None)

    def to_dict(self) -> dict:
        out = {
            "kernel": self.kernel,
            "analysis": self.analysis,
            "models": self.models,
            "per_group": self.per_group,
            "alpha": self.alpha,
            "rule": self.rule,
            "settings": self.settings,
            "summaries": self.summaries,
            "seed": self.seed,
            "stream": self.stream,
            "chunk": self.chunk,
            "chunk_size": self.chunk_size,
            "replicates": self.replicates,
        }
        if self.max_rows:
            out["max_rows"] = self.max_rows
        return out

    @classmethod
    def from_dict(cls, task: dict) -> ChunkTask:
        for key in _REQUIRED:
            if key not in task:
                raise QuestionError(f"task.{key}", "is required in a simulation chunk task")
        return cls(
            kernel=task["kernel"],
            analysis=task.get("analysis") or task["kernel"],
            models=task["models"],
            per_group=[int(n) for n in task["per_group"]],
            alpha=float(task["alpha"]),
            rule=task["rule"],
            settings=task.get("settings") or {},
            summaries=bool(task.get("summaries", False)),
            seed=int(task["seed"]),
            stream=int(task["stream"]),
            chunk=int(task["chunk"]),
            chunk_size=int(task.get("chunk_size") or task["replicates"]),
            replicates=int(task["replicates"]),
            max_rows=task.get("max_rows"),
        )


class Streams:
    """The generators of one (seed, stream, chunk), created on first use and kept for the chunk."""

    def __init__(self, seed: int, stream: int, chunk: int):
        self.key = (seed, stream, chunk)
        self.gens: dict[tuple[int, int, int], np.random.Generator] = {}

    def gen(self, group: int, variate: int, block: int = 0) -> np.random.Generator:
        """Return the generator of (group, variate, block)."""
        k = (group, variate, block)
        g = self.gens.get(k)
        if g is None:
            seed, stream, chunk = self.key
            ss = np.random.SeedSequence(seed, spawn_key=(stream, chunk, group, variate, block))
            g = self.gens[k] = np.random.Generator(np.random.PCG64(ss))
        return g

    def raw(self, index: int, model: dict, n: int, rows: int, variate0: int = 0) -> np.ndarray:
        """Return the next ``rows`` replicates of n raw observations, shape (rows, n)."""
        k = models.variates(model)
        blocks = -(-n // BLOCK)
        if blocks == 1 and n == BLOCK:
            return models.sample(
                model, [self.gen(index, variate0 + v, 0) for v in range(k)], (rows, BLOCK)
            )
        out = np.empty((rows, n))
        for b in range(blocks):
            part = models.sample(
                model, [self.gen(index, variate0 + v, b) for v in range(k)], (rows, BLOCK)
            )
            width = min(BLOCK, n - b * BLOCK)
            out[:, b * BLOCK : b * BLOCK + width] = part[:, :width]
        return out

    def raw_moments(self, index: int, model: dict, n: int, rows: int, center: float = 0.0):
        """Return per-row (mean, variance) of the same raw data as ``raw``, block by block.

        Summing each block as drawn avoids assembling the (rows, n) array; ``center`` is
        subtracted first when the mean dwarfs the spread (see vectests.row_moments).
        """
        k = models.variates(model)
        s = np.zeros(rows)
        ss = np.zeros(rows)
        for b in range(-(-n // BLOCK)):
            part = models.sample(model, [self.gen(index, v, b) for v in range(k)], (rows, BLOCK))
            width = min(BLOCK, n - b * BLOCK)
            if width < BLOCK:
                part = part[:, :width]
            if center:
                part = part - center
            s += part.sum(axis=1)
            ss += np.einsum("ij,ij->i", part, part)
        mean = s / n
        var = (ss - s * mean) / (n - 1)
        np.maximum(var, 0.0, out=var)
        if center:
            mean += center
        return mean, var

    def normal_summary(self, index: int, model: dict, n: int, rows: int):
        """Return (sample means, sample variances) of n normal draws without drawing them."""
        sd = model["sd"]
        mean = self.gen(index, 0).standard_normal(rows)
        mean *= sd / math.sqrt(n)
        mean += model["mean"] + model.get("shift", 0.0)
        var = self.gen(index, 1).standard_gamma((n - 1) / 2.0, rows)  # χ²(n−1)/2
        var *= 2.0 * sd * sd / (n - 1)
        return mean, var

    def binomial(self, index: int, p: float, n: int, rows: int) -> np.ndarray:
        """Return binomial(n, p) counts by inverting one uniform each (monotone in n)."""
        u = self.gen(index, 0).random(rows)
        np.subtract(1.0, u, out=u)  # (0, 1]: ppf(0) would fall below the support
        return vectests.binomial_quantile(u, n, p)  # = stats.binom.ppf(u, n, p), digit for digit

    def correlation(self, r: float, n: int, rows: int) -> np.ndarray:
        """Return sample correlations of n bivariate normal pairs via Bartlett's decomposition."""
        c1 = np.sqrt(2.0 * self.gen(0, 0).standard_gamma((n - 1) / 2.0, rows))
        c2sq = 2.0 * self.gen(0, 1).standard_gamma((n - 2) / 2.0, rows)
        z = self.gen(0, 2).standard_normal(rows)
        s = math.sqrt(1.0 - r * r)
        a = r * c1 + s * z
        return a / np.sqrt(a * a + s * s * c2sq)


def run_chunk(task: dict) -> dict:
    """Run one chunk task and return {"rejections", "replicates"} (plus extras, e.g. "events").

    Pure: the result depends only on the task. Rows are drawn in sub-batches that keep working
    memory bounded; because each generator is consumed row by row, the sub-batch size (the
    optional ``max_rows``) does not change the digits.
    """
    from .kernels import kernel

    t = ChunkTask.from_dict(task)
    if t.replicates < 1:
        raise QuestionError("task.replicates", f"must be ≥ 1; got {t.replicates}")
    k = kernel(t.kernel)
    max_rows = int(t.max_rows or max(1, MEMORY_BYTES // k.row_bytes(t)))
    if not t.summaries and not t.max_rows:
        max_rows = min(max_rows, CACHE_ROWS)
    streams = Streams(t.seed, t.stream, t.chunk)
    rejections, done, extras = 0, 0, {}
    while done < t.replicates:
        rows = min(max_rows, t.replicates - done)
        reject, extra = k.run(streams, t, rows)
        rejections += int(np.count_nonzero(reject))
        for name, v in extra.items():
            extras[name] = extras.get(name, 0) + v
        done += rows
    return {"rejections": rejections, "replicates": t.replicates, **extras}


def draws_per_replicate(task: ChunkTask) -> int:
    """Random draws one replicate of ``task`` makes (the budget's unit)."""
    from .kernels import kernel

    return kernel(task.kernel).draws(task)
