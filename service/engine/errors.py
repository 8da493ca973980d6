"""Typed errors raised by the engine.

EngineError                 base: every error the engine raises on purpose
├── QuestionError           the question cannot be answered as posed (names a field)
│   └── BudgetExceeded      the simulation would cost (or is costing) more than the budget
└── Cancelled               the caller asked to stop (checked between chunks)
"""

from __future__ import annotations


class EngineError(Exception):
    """Base class of every error the engine raises on purpose."""


class QuestionError(EngineError):
    """The question cannot be answered as posed; ``field`` is a dotted path into the question."""

    def __init__(self, field: str, message: str):
        super().__init__(f"{field}: {message}")
        self.field = field
        self.message = message

    def as_errors(self) -> dict[str, list[str]]:
        """Return the error as a field-keyed mapping, the shape the API and CLI print."""
        return {self.field: [self.message]}


class BudgetExceeded(QuestionError):
    """The estimated simulation cost is above the configured budget."""

    def __init__(self, estimate: int, budget: int):
        super().__init__(
            "simulation.replicates",
            f"estimated cost {estimate:,} draws exceeds the budget of {budget:,}; "
            "lower the replicates or ask for an analytic answer",
        )
        self.estimate = estimate
        self.budget = budget

    @classmethod
    def during(cls, spent: int, batch: int, budget: int) -> BudgetExceeded:
        """The error for a run that has drawn ``spent`` and whose next batch would pass the budget."""
        err = cls(spent + batch, budget)
        err.message = (
            f"the simulation has drawn {spent:,} random numbers and its next batch needs "
            f"{batch:,} more, past the budget of {budget:,}; the search went further than the "
            "estimate allowed: lower the replicates, give a larger effect or ask for an analytic "
            "answer"
        )
        err.args = (f"{err.field}: {err.message}",)
        return err


class Cancelled(EngineError):
    """The caller's cancel hook returned true between two chunks."""


# What a numeric failure means for the person who asked, in words (never the exception's name).
_NUMERIC_FAILURES: tuple[tuple[type[BaseException], str], ...] = (
    (
        OverflowError,
        "the numbers in the question overflow double precision (about 1.8e308) during the "
        "computation; check the effect, SD, rates and sizes for values far out of scale",
    ),
    (
        ZeroDivisionError,
        "a quantity the method divides by came out as zero; check that SDs, rates and "
        "proportions are not zero or vanishingly small (below about 1e-300)",
    ),
    (
        MemoryError,
        "the computation needs more memory than the service has; lower the sample sizes, the "
        "replicates or the number of grid cells",
    ),
    (
        RecursionError,
        "the question is nested too deeply to compute; simplify it",
    ),
    (
        ArithmeticError,
        "a numeric step failed for these inputs (a value out of the range it can handle); "
        "check the question for extreme values",
    ),
    (
        ValueError,
        "a numeric step could not handle these inputs (a value outside the range the method "
        "accepts); check the question for extreme or contradictory values",
    ),
)
UNFORESEEN_FAILURE = (
    "the computation failed in a way the service did not foresee for these inputs; the error "
    "was logged for the service's maintainers; check the question for extreme values or ask "
    "the biostatistics core"
)


def describe_failure(exc: BaseException) -> str:
    """Say in words what an unforeseen failure of a computation means for the person who asked.

    The message is stored and shown to users; the exception itself belongs in the logs only.
    """
    for kind, words in _NUMERIC_FAILURES:
        if isinstance(exc, kind):
            return words
    return UNFORESEEN_FAILURE
