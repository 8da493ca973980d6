"""Load the engine's simulation code in the worker's main process, before the pool forks.

A pool child otherwise imports the simulation modules and the design registry on its first
chunk (0.05-0.15 s, more where no bytecode is cached): a helper that joins a split job paid it
inside its first unit, while the worker that owned the job waited for that unit at the end.
"""

from __future__ import annotations

from celery.signals import worker_init

from service.engine import designs, run_chunk

# A few replicates of a test on drawn data: runs the kernel path's own lazy imports too.
_WARM_CHUNK = {
    "kernel": "t_welch",
    "analysis": "welch_t",
    "models": [
        {"family": "lognormal", "mu": 0.0, "sigma": 0.5},
        {"family": "lognormal", "mu": 0.2, "sigma": 0.5},
    ],
    "per_group": [8, 8],
    "alpha": 0.05,
    "rule": {"aim": "superiority", "alternative": "two-sided", "direction": 1, "margin": None},
    "settings": {},
    "summaries": False,
    "seed": 1,
    "stream": 0,
    "chunk": 0,
    "chunk_size": 10,
    "replicates": 10,
}


def warm() -> None:
    """Import the design registry and the simulation modules by running one tiny chunk."""
    designs.cells()
    run_chunk(dict(_WARM_CHUNK))


@worker_init.connect
def _warm_before_fork(**_kwargs) -> None:
    warm()
