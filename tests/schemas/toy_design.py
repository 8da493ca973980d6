"""A small extra design, registered by tests only: counts in two groups, Wald test of the rate
ratio. It proves that a design module alone reaches the schema, the catalogue, the JSON Schema
and the OpenAPI document (no other file names it)."""

from __future__ import annotations

from service.engine import designs
from service.engine.designs.base import Analysis, Design, Field

FIELDS = (
    Field(
        name="rate_ratio",
        block="effect",
        type="number",
        help="Event rate in the treatment group divided by the control group's.",
        label="rate ratio",
        minimum=0.0,
        exclusive_minimum=True,
    ),
    Field(
        name="control_rate",
        block="assumptions",
        type="number",
        help="Events per person in the control group over the follow-up.",
        label="control event rate",
        unit="events per person",
        minimum=0.0,
        exclusive_minimum=True,
    ),
    Field(
        name="overdispersion",
        block="assumptions",
        type="number",
        help="Variance inflation over the Poisson variance.",
        label="overdispersion",
        minimum=1.0,
        default=1.0,
    ),
)


def _validate(q: dict, find: str, from_data: bool) -> dict[str, list[str]]:
    return {}


TOY = Design(
    outcome="count",
    layout="two_groups",
    label="Count outcome, two groups",
    fields=FIELDS,
    forms=(),
    solved="rate_ratio",
    analyses=(
        Analysis(
            name="wald_rate",
            label="Wald test of the rate ratio",
            methods=("analytic",),
            aims=("superiority",),
            reference="a toy analysis for tests",
        ),
    ),
    validate=_validate,
    default_analysis=lambda q: "wald_rate",
    groups=lambda q: 2,
    allocation=lambda q: [1.0, float(q.get("allocation_ratio") or 1.0)],
    derive=lambda q: {},
)

QUESTION = {
    "outcome": "count",
    "layout": "two_groups",
    "effect": {"rate_ratio": 0.7},
    "assumptions": {"control_rate": 1.5},
}


def register() -> None:
    """Register the toy design (idempotent)."""
    designs.register(TOY)
