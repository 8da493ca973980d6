"""Running batches of chunk tasks: the cache of chunk results, progress, cancel and the ledger."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from . import search
from .chunks import STREAM_NULL, ChunkTask, draws_per_replicate, run_chunk
from .errors import Cancelled, QuestionError
from .ledger import Ledger
from .plan import Plan

Executor = Callable[[list[dict]], list[dict]]


@dataclass(frozen=True)
class Request:
    """Replicates of one stream at given group sizes; ``plan`` and ``tag`` let one runner serve
    plans that differ in the effect (the effect search), the tag keeping their chunks apart."""

    stream: int
    per_group: list[int]
    replicates: int
    plan: Plan | None = None
    tag: tuple | None = None


def _task_draws(task: dict) -> int:
    return task["replicates"] * draws_per_replicate(ChunkTask.from_dict(task))


def make_task(
    plan: Plan,
    per_group: list[int],
    *,
    stream: int,
    chunk: int,
    chunk_size: int,
    replicates: int,
    seed: int,
) -> dict:
    """Return the JSON task for one chunk: everything ``run_chunk`` needs, nothing else."""
    return ChunkTask(
        kernel=plan.kernel,
        analysis=plan.analysis,
        models=plan.null if stream == STREAM_NULL else plan.models,
        per_group=[int(n) for n in per_group],
        alpha=plan.alpha,
        rule=plan.rule.to_dict(),
        settings=plan.settings,
        summaries=plan.summaries,
        seed=int(seed),
        stream=int(stream),
        chunk=int(chunk),
        chunk_size=int(chunk_size),
        replicates=int(replicates),
    ).to_dict()


class Runner:
    """Turns requests into chunk batches and caches chunk results."""

    def __init__(
        self,
        plan: Plan,
        seed: int,
        chunk_size: int,
        executor: Executor | None,
        progress: Callable[[float], None] | None,
        cancel: Callable[[], bool] | None,
        planned: int,
        *,
        full: int = 0,
        budget: int | None = None,
    ):
        self.plan, self.seed, self.chunk_size = plan, seed, chunk_size
        self.executor, self.progress, self.cancel = executor, progress, cancel
        self.planned, self.done, self.reported = max(planned, 1), 0, 0.0
        self.cache: dict[tuple, dict] = {}
        self.full = full  # the full replicate count, to label runs in the ledger
        self.ledger = Ledger(budget, _task_draws)

    def _tasks(self, r: Request) -> list[tuple[tuple, dict]]:
        out = []
        for chunk in range(-(-r.replicates // self.chunk_size)):
            size = min(self.chunk_size, r.replicates - chunk * self.chunk_size)
            key = (r.stream, tuple(r.per_group), chunk, size, r.tag)
            task = make_task(
                r.plan or self.plan,
                r.per_group,
                stream=r.stream,
                chunk=chunk,
                chunk_size=self.chunk_size,
                replicates=size,
                seed=self.seed,
            )
            out.append((key, task))
        return out

    def batch(self, requests: list[Request]) -> list[search.Estimate]:
        """Run every missing chunk of ``requests`` in one executor batch; return their estimates."""
        wanted = [self._tasks(r) for r in requests]
        todo: dict[tuple, dict] = {}
        labels: dict[tuple, str] = {}
        for request, ks in zip(requests, wanted, strict=True):
            for key, task in ks:
                if key not in self.cache and key not in todo:
                    todo[key] = task
                    labels[key] = _label(request.stream, request.replicates, self.full)
        if todo:
            keys, tasks = list(todo), list(todo.values())
            self.ledger.charge(tasks, [labels[k] for k in keys])
            results = self._run(tasks)
            if len(results) != len(tasks):
                raise QuestionError(
                    "simulation", "the executor returned a different number of results"
                )
            self.cache.update(zip(keys, results, strict=True))
        out = []
        for ks in wanted:
            rej = sum(int(self.cache[k]["rejections"]) for k, _ in ks)
            reps = sum(int(self.cache[k]["replicates"]) for k, _ in ks)
            out.append(search.Estimate(rej, reps))
        return out

    def extra_sum(self, name: str, request: Request) -> int | None:
        """Return the sum of a chunk extra (e.g. events) over the chunks of one request, or None
        when the kernel reports no such extra."""
        results = [self.cache[k] for k, _ in self._tasks(request)]
        if not any(name in r for r in results):
            return None
        return sum(int(r.get(name, 0)) for r in results)

    def _tick(self, reps: int) -> None:
        self.done += reps
        if self.progress is not None:
            f = min(0.99, self.done / self.planned)
            if f > self.reported:
                self.reported = f
                self.progress(f)

    def _check_cancel(self) -> None:
        if self.cancel is not None and self.cancel():
            raise Cancelled("cancelled between simulation chunks")

    def _run(self, tasks: list[dict]) -> list[dict]:
        if self.executor is None:
            results = []
            for task in tasks:
                self._check_cancel()
                results.append(run_chunk(task))
                self._tick(task["replicates"])
            return results
        self._check_cancel()
        results = list(self.executor(tasks))
        self._tick(sum(t["replicates"] for t in tasks))
        return results


def _label(stream: int, reps: int, full: int) -> str:
    """The ledger's kind of run: the type I check, a full-replicate run or a search candidate."""
    if stream == STREAM_NULL:
        return "null"
    return "full" if reps >= full else "search"
