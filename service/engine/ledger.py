"""What a simulation actually ran: replicates by kind of run, random draws, and the budget.

The cost estimate refuses a question before it starts; the ledger enforces the same budget on
the draws the run really makes, batch by batch, so a search that wanders further than the
estimate assumed stops with a clear error instead of running on.
"""

from __future__ import annotations

from collections.abc import Callable

from .errors import BudgetExceeded


class Ledger:
    """Counts replicates per label and random draws; refuses a batch that would pass the budget."""

    def __init__(self, budget: int | None, draws_of: Callable[[dict], int]):
        self.budget = budget
        self.draws_of = draws_of  # random draws one chunk task makes
        self.draws = 0
        self.replicates: dict[str, int] = {}

    def charge(self, tasks: list[dict], labels: list[str]) -> None:
        """Book a batch before it runs; raise BudgetExceeded if it would pass the budget."""
        cost = sum(self.draws_of(t) for t in tasks)
        if self.budget is not None and self.draws + cost > self.budget:
            raise BudgetExceeded.during(self.draws, cost, self.budget)
        self.draws += cost
        for task, label in zip(tasks, labels, strict=True):
            self.replicates[label] = self.replicates.get(label, 0) + int(task["replicates"])

    def count(self, label: str) -> int:
        """Return the replicates run under ``label`` so far."""
        return self.replicates.get(label, 0)
