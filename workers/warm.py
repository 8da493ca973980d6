"""Load the engine's simulation code in the worker's main process, before the pool forks.

A pool child otherwise imports the simulation modules and the design registry on its first
chunk (0.05-0.15 s, more where no bytecode is cached): a helper that joins a split job paid it
inside its first unit, while the worker that owned the job waited for that unit at the end.
"""

from __future__ import annotations

from celery.signals import worker_init

from service.engine import run_chunk
from service.engine.plan import make_plan
from service.engine.runner import make_task
from service.schemas.question import load_question

# Welch's t test on drawn lognormal groups: the kernel path's own lazy imports run too.
_WARM_QUESTION = {
    "outcome": "continuous",
    "layout": "two_groups",
    "analysis": "welch_t",
    "find": "power",
    "sample_size": {"per_group": [8, 8]},
    "effect": {"difference": 0.2},
    "assumptions": {"sd": 0.5},
    "method": "simulation",
    "simulation": {
        "replicates": 1000,
        "seed": 1,
        "data": {
            "control": {"family": "lognormal", "mu": 0.0, "sigma": 0.5},
            "treatment": {"family": "lognormal", "mu": 0.2, "sigma": 0.5},
        },
    },
}
_WARM_REPLICATES = 10


def warm() -> dict:
    """Validate a question as the API does, plan it and run a tiny chunk of it, so the schemas,
    the design registry and the simulation modules are loaded (and the chunk is built by the
    engine's own code, not written out here); return the chunk's result."""
    question = load_question(_WARM_QUESTION)
    plan = make_plan(question, question["alpha"])
    task = make_task(
        plan,
        question["sample_size"]["per_group"],
        stream=0,
        chunk=0,
        chunk_size=_WARM_REPLICATES,
        replicates=_WARM_REPLICATES,
        seed=question["simulation"]["seed"],
    )
    return run_chunk(task)


@worker_init.connect
def _warm_before_fork(**_kwargs) -> None:
    warm()
