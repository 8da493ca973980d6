"""The price of an exploration: checked against its question, its draws estimated, its budget.

An exploration follows up a computed request: a sensitivity grid re-solves the question at
every combination of listed values; a robustness panel simulates the planned test under
departures from the planned data. Its body item (``requests.ExplorationCreateSchema``) is the
same posted with a request or later; :func:`price` is the one check of both paths (the API
view stores what it returns), and :func:`budget_refusal` the one wording of the per-simulation
budget (submission, explorations, the worker).
"""

from __future__ import annotations

from typing import Any

from .fields import extreme_fields


class ExplorationRefused(Exception):
    """An exploration that does not fit its question or budget; ``errors`` keyed inside the item."""

    def __init__(self, message: str, errors: dict[str, list[str]], **extra: Any):
        super().__init__(message)
        self.message = message
        self.errors = errors
        self.extra = extra


EXPLORATION_ADVICE = "use fewer cells or fewer replicates"


def budget_refusal(estimate: int, budget: int, advice: str = EXPLORATION_ADVICE) -> str | None:
    """The words refusing a simulation estimated at ``estimate`` draws, or None within budget.

    The one wording of the per-simulation budget (submission, explorations, the worker).
    """
    if estimate <= budget:
        return None
    return (
        f"estimated cost {estimate:,} draws exceeds the per-simulation budget of "
        f"{budget:,}; {advice}"
    )


def _refuse_extreme_cells(grid: dict) -> None:
    """Refuse grid values whose magnitude no cell could compute with (as at submission)."""
    errors = {}
    for path, values in grid.items():
        extreme = [v for v in values if extreme_fields(v)] if isinstance(values, list) else []
        if extreme:
            errors[f"grid.{path}"] = [
                f"values of magnitude above 1e100 or below 1e-100 leave double precision in the "
                f"computation; got {extreme[0]!r}"
            ]
    if errors:
        raise ExplorationRefused(
            f"{len(errors)} grid axis (axes) hold values no cell could compute with", errors
        )


def _refuse_values_the_question_refuses(question: dict, grid: dict) -> None:
    """Refuse each grid value the question itself could not hold (alpha 0.7, a negative SD, an
    allocation ratio of a single-group layout): a cell is the question at that value, so it is
    loaded as a posted question would be, and its error is the submission's own words."""
    from service.engine.explore import value_questions

    from .errors import QuestionInvalid
    from .question import load_question

    try:
        load_question(question)
    except QuestionInvalid:
        # A question stored under older, looser checks: refusing its every value would blame
        # the grid; its cells report the engine's errors instead.
        return
    errors = {}
    for path, index, cell in value_questions(question, grid):
        try:
            load_question(cell)
        except QuestionInvalid as exc:
            said = "; ".join(f"{field}: {' '.join(words)}" for field, words in exc.errors.items())
            errors[f"grid.{path}.{index}"] = [f"gives a question that is refused: {said}"]
    if errors:
        raise ExplorationRefused(
            f"{len(errors)} grid value(s) give a question that would be refused at submission",
            errors,
        )


def price(
    question: dict,
    record: dict | None,
    item: dict,
    *,
    budget: int | None,
    seed: int | None = None,
) -> tuple[dict, int]:
    """Check one exploration against the normalized question; return (params to store, draws).

    ``record`` is the request's result (or its analytic counterpart's, which prices a panel of a
    find = sample_size question before it is computed); without one a panel is priced at 0
    and priced again by the worker. A robustness panel of a simulated request lends its seed
    and replicates; otherwise ``seed`` (drawn by the caller) is stored. Raises
    :class:`ExplorationRefused` with errors keyed inside the item (``type``, ``grid.<path>``,
    ``replicates``).
    """
    from service.engine import QuestionError
    from service.engine.explore import ROBUSTNESS_REPLICATES, exploration_cost, robustness_refusal

    kind = item["type"]
    if kind == "robustness_panel":
        message = robustness_refusal(question)
        if message is not None:
            raise ExplorationRefused(message, {"type": [message]})
        sim = question.get("simulation") or {}
        own_seed = sim.get("seed")
        params = {
            "replicates": int(
                item.get("replicates") or sim.get("replicates") or ROBUSTNESS_REPLICATES
            ),
            "seed": int(own_seed if own_seed is not None else (seed or 0)),
        }
        field = "replicates"
    else:
        params = {"grid": item["grid"]}
        field = "grid"
        _refuse_extreme_cells(item["grid"])
    try:
        if kind == "sensitivity_grid":
            _refuse_values_the_question_refuses(question, item["grid"])
        estimate = int(exploration_cost(kind, params, question, record))
    except QuestionError as exc:
        key = (
            exc.field
            if exc.field.startswith("grid")
            else ("type" if kind == "robustness_panel" else "grid")
        )
        raise ExplorationRefused(str(exc), {key: [exc.message]}) from None
    message = budget_refusal(estimate, budget) if budget is not None else None
    if message is not None:
        raise ExplorationRefused(message, {field: [message]}, estimate=estimate, budget=budget)
    return params, estimate


def price_errors(question: dict, items: list[dict], budget: int | None) -> dict:
    """Field-keyed errors (``<index>.<field>``) of the explorations posted with a request."""
    q = question
    if q.get("method") == "simulation" and (q.get("simulation") or {}).get("seed") is None:
        # The seed is drawn after validation; it changes no path, value or cost.
        q = {**q, "simulation": {**q["simulation"], "seed": 0}}
    errors: dict[str, list[str]] = {}
    for index, item in enumerate(items):
        try:
            price(q, None, item, budget=budget)
        except ExplorationRefused as exc:
            errors.update({f"{index}.{key}": messages for key, messages in exc.errors.items()})
    return errors
