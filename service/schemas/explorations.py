"""Explorations of a request: the one body item, the stored row as the API shows it, and its price.

An exploration follows up a computed request: a sensitivity grid re-solves the question at
every combination of listed values; a robustness panel simulates the planned test under
departures from the planned data. One item shape serves both places it is posted:

    {"type": "sensitivity_grid", "grid": {"effect.difference": [4, 5, 6], ...}}
    {"type": "robustness_panel", "replicates": 5000}        # replicates optional

``POST /v1/requests/{id}/explorations`` takes one item; ``POST /v1/requests`` takes a list of
them under ``explorations``. :func:`price` checks an item against the normalized question and
estimates its draws, for both.
"""

from __future__ import annotations

from typing import Any

from marshmallow import ValidationError, fields, validate, validates_schema

from service.store.models import EXPLORATION_STATUSES, EXPLORATION_TYPES

from .fields import Choice, Interval, Strict, Whole

TYPES = tuple(EXPLORATION_TYPES)
MAX_ITEMS = 10  # explorations posted with one request

GRID_DESCRIPTION = (
    "Dotted field path of the question -> list of values, e.g. "
    '{"effect.difference": [4, 5, 6], "adjustments.dropout": [0.1, 0.2]}; at most 3 axes and '
    "400 cells."
)


class GridField(fields.Dict):
    """A sensitivity grid: field path -> list of values (checked against the question later)."""

    def __init__(self, **kwargs: Any):
        super().__init__(
            keys=fields.String(validate=validate.Length(1, 100)),
            values=fields.List(fields.Raw(), validate=validate.Length(min=1, max=400)),
            metadata={"description": GRID_DESCRIPTION},
            **kwargs,
        )


class ExplorationItemSchema(Strict):
    """One exploration to run once the request is computed."""

    type = Choice(TYPES, required=True, description="What to explore.")
    grid = GridField()
    replicates = Whole(
        Interval(200, 2_000_000),
        description="robustness_panel only: replicates per data model (default: the request's).",
    )

    @validates_schema(skip_on_field_errors=True)
    def fields_fit_the_type(self, data: dict, **_kwargs: Any) -> None:
        """A sensitivity grid needs a grid; a robustness panel takes none."""
        kind = data.get("type")
        if kind == "sensitivity_grid" and "grid" not in data:
            raise ValidationError("required for type 'sensitivity_grid'", "grid")
        if kind == "sensitivity_grid" and data.get("replicates") is not None:
            raise ValidationError(
                "only for type 'robustness_panel'; a grid uses the request's", "replicates"
            )
        if kind == "robustness_panel" and "grid" in data:
            raise ValidationError("only for type 'sensitivity_grid'", "grid")


class ExplorationSchema(Strict):
    """A sensitivity grid or robustness panel of a request, and its result when done."""

    id = fields.String()
    request_id = fields.String()
    type = fields.String(validate=validate.OneOf(TYPES))
    params = fields.Dict()
    status = fields.String(validate=validate.OneOf(EXPLORATION_STATUSES))
    requested_by = fields.String()
    created_at = fields.AwareDateTime()
    published_at = fields.AwareDateTime(allow_none=True)
    attempts = fields.Integer()
    result = fields.Dict(allow_none=True)
    error = fields.String(allow_none=True)
    finished_at = fields.AwareDateTime(allow_none=True)


class ExplorationListSchema(Strict):
    """GET /v1/requests/{id}/explorations."""

    items = fields.List(fields.Nested(ExplorationSchema))


class ExplorationsField(fields.List):
    """``explorations`` of a request body: a list of items (at most MAX_ITEMS)."""

    def __init__(self, **kwargs: Any):
        super().__init__(
            fields.Nested(ExplorationItemSchema),
            validate=validate.Length(max=MAX_ITEMS),
            metadata={
                "description": "Explorations computed once the request is (sensitivity grids, "
                "robustness panels); each item as in POST /v1/requests/{id}/explorations."
            },
            **kwargs,
        )


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
    from service.api.feasibility import extreme_fields

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
    from service.engine.explore import ROBUSTNESS_REPLICATES, analysis_cost, robustness_refusal

    kind = EXPLORATION_TYPES[item["type"]]
    if kind == "robustness":
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
        estimate = int(analysis_cost(kind, params, question, record))
    except QuestionError as exc:
        key = (
            exc.field
            if exc.field.startswith("grid")
            else ("type" if kind == "robustness" else "grid")
        )
        raise ExplorationRefused(str(exc), {key: [exc.message]}) from None
    message = budget_refusal(estimate, budget) if budget is not None else None
    if message is not None:
        raise ExplorationRefused(message, {field: [message]}, estimate=estimate, budget=budget)
    return params, estimate


def exploration_errors(question: dict, items: list[dict], budget: int | None) -> dict:
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
