"""sizewise's numeric engine: analytic and Monte Carlo sample size, reproducible by seed.

Pure numpy/scipy (see README.md beside this file). The public surface is listed in ``__all__``.
"""

from .compute import compute, draw_seed, estimate_cost, run_chunk
from .errors import BudgetExceeded, Cancelled, EngineError, QuestionError
from .records import CAUTIONS, canonical_json, record_hash, verify

__all__ = [
    "CAUTIONS",
    "BudgetExceeded",
    "Cancelled",
    "EngineError",
    "QuestionError",
    "canonical_json",
    "compute",
    "draw_seed",
    "estimate_cost",
    "record_hash",
    "run_chunk",
    "verify",
]
