"""The question schema: validate a posted sample-size question and return its normalized form.

``QuestionSchema().load(raw)`` returns the dict described in DEVELOPERS.md ("The question"):
what was entered, every default filled in. ``load_question(raw)`` does the same but raises
``QuestionInvalid`` with dotted field paths, the shape the API and the CLI print.

Nothing here is written per design. ``outcome`` and ``layout`` pick a design from the engine's
registry; its declared fields give the ``effect``, ``assumptions`` and ``analysis_options``
blocks their types, ranges and forms (``cell.py``), its analyses the allowed ``analysis``, and
the cross-field rules (``rules.py``) read only the design object. Numbers are strict: JSON
numbers only (no strings, no booleans, no NaN or infinity); every message names what is allowed
and echoes the posted value.
"""

from __future__ import annotations

from collections.abc import Mapping
from contextvars import ContextVar
from typing import Any

from marshmallow import ValidationError, fields, post_load, validates_schema

from . import resolve, rules
from .blocks import (
    AdjustmentsSchema,
    AssuranceSchema,
    HypothesisSchema,
    InterimSchema,
    SampleSizeSchema,
    SimulationField,
    SimulationSchema,
)
from .cell import Cell
from .errors import QuestionInvalid, flatten_errors
from .fields import (
    Choice,
    Flag,
    Interval,
    Number,
    Obj,
    Strict,
    Text,
    Whole,
    got,
)
from .shared import shared
from .vocabulary import (
    ALTERNATIVES,
    FINDS,
    METHODS,
    ROUNDINGS,
    cell_of,
    cells_text,
    layouts,
    outcomes,
)


class CellWord(fields.String):
    """``outcome`` or ``layout``: a word of the registered cells, checked when loaded (the
    registry may grow after import)."""

    def __init__(self, which: str, *, description: str):
        self.which = which
        super().__init__(required=True, metadata={"description": description})
        self.error_messages["required"] = f"is required: {self._allowed()}"
        self.error_messages["null"] = self.error_messages["required"] + "; got null"

    def words(self) -> tuple[str, ...]:
        return outcomes() if self.which == "outcome" else layouts()

    def _allowed(self) -> str:
        return "one of the registered cells' words (GET /v1/catalogue)"

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, str) or value not in self.words():
            raise ValidationError(
                f"must be one of {', '.join(self.words())} (the cells are {cells_text()}); "
                f"{got(value)}"
            )
        return value


class Block(fields.Raw):
    """A cell block (effect, assumptions, analysis_options): checked against the cell's fields
    by the cross-field pass, which knows the cell."""

    def __init__(self, *, description: str):
        super().__init__(allow_none=True, load_default=None, metadata={"description": description})


class QuestionSchema(Strict):
    """A sample-size, power or detectable-effect question; ``load`` returns the normalized form."""

    outcome = CellWord("outcome", description="what is measured: the outcome's kind")
    layout = CellWord("layout", description="how the study is laid out: its groups")
    analysis = Text(description="the test the study will use; default per cell (the catalogue)")
    find = Choice(FINDS, load_default="sample_size", description="what to solve for")
    alpha = Number(
        Interval(0, 0.5, low_open=True),
        description="type I error rate (before any Bonferroni split); default 0.05, and 0.025 "
        "(one-sided) for noninferiority and equivalence (ICH E9, 1998)",
    )
    alternative = Choice(
        ALTERNATIVES,
        description='"two-sided" (default for superiority) or "one-sided" (looking where the '
        "assumed effect points; forced for noninferiority and equivalence)",
    )
    target_power = Number(
        Interval(0, 1, low_open=True, high_open=True),
        description="power to reach, in (alpha, 1); default 0.80 (common practice); "
        "not used when find = power",
    )
    effect = Block(description="the effect to detect; the cell's fields (GET /v1/catalogue)")
    assumptions = Block(
        description="what the study assumes: variability, rates, timeline (the cell's fields)"
    )
    analysis_options = Block(description="options of the cell's analysis, if it has any")
    hypothesis = Obj(
        HypothesisSchema, description="superiority (default), noninferiority or equivalence"
    )
    allocation_ratio = Number(
        Interval(0, 1000, low_open=True),
        description="treatment:control allocation, default 1 (two-group layouts only)",
    )
    allocation_rounding = Choice(
        ROUNDINGS,
        description="how a solved size becomes whole subjects: each_group (default) rounds "
        "every group up on its own; exact_ratio rounds up to the smallest whole sizes in "
        "exactly the allocation ratio (a ratio that is a fraction with denominator at most 100)",
    )
    sample_size = Obj(
        SampleSizeSchema,
        description="enrolled numbers for find = power or effect; absent for find = sample_size",
    )
    adjustments = Obj(AdjustmentsSchema, description="dropout, clustering and multiple comparisons")
    interim = Obj(
        InterimSchema,
        description="planned interim analyses (group-sequential design), or null for a single "
        "final analysis; offered by the cells whose catalogue entry says interim: true",
    )
    assurance = Obj(
        AssuranceSchema,
        description="optional prior on the effect (mean, sd, lower, upper) and a target: the "
        "assurance, power averaged over the prior, is reported beside the power",
    )
    method = Choice(
        METHODS,
        description="analytic (default when the analysis has a formula) or simulation",
    )
    simulation = SimulationField(
        SimulationSchema, description="Monte Carlo settings for method = simulation"
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _cross_field(self, data: dict, original_data: Any, **kwargs: Any) -> None:
        if not isinstance(original_data, Mapping):
            return
        ctx = rules.Context(raw=original_data, data=data, design=cell_of(original_data))
        if ctx.design is None and "outcome" in data and "layout" in data:
            ctx.add(
                "layout",
                f"{data['outcome']} × {data['layout']} is not a cell; the cells are {cells_text()}",
            )
        rules.check(ctx)
        if ctx.errors:
            raise ValidationError(ctx.errors)
        if ctx.partial is not None:
            _CHECKED.set((data, ctx.partial))

    @post_load(pass_original=True)
    def _normalize(self, data: dict, original_data: Any, **kwargs: Any) -> dict:
        checked = _CHECKED.get()
        if checked is not None and checked[0] is data:
            _CHECKED.set(None)
            return checked[1]
        design = cell_of(original_data)
        find = data.get("find") or "sample_size"
        cell = Cell(design, original_data, find, resolve.from_data(original_data, find))
        cell.load_blocks()
        return resolve.normalize(design, data, original_data, cell.blocks())


# The cross-field checks build the normalized question of the data they check (rules.Context's
# partial); the post-load step that follows in the same load takes it over for that same data
# object instead of loading the cell's blocks and normalizing again (a third of a load's time).
# A context variable, not the schema: one shared schema instance serves every thread.
_CHECKED: ContextVar[tuple[dict, dict] | None] = ContextVar("sizewise_checked", default=None)


# ---------------------------------------------------------------------------------------------
# Entry points


def load_question(raw: Any) -> dict:
    """Validate and normalize a posted question; raise ``QuestionInvalid`` on bad input."""
    if not isinstance(raw, Mapping):
        raise QuestionInvalid(
            {"question": [f"must be a JSON object with at least outcome and layout; {got(raw)}"]}
        )
    try:
        return shared(QuestionSchema).load(dict(raw))
    except ValidationError as exc:
        raise QuestionInvalid(flatten_errors(exc.messages), exc.messages) from None


def register_openapi_types(plugin: Any) -> None:
    """Tell apispec's MarshmallowPlugin how the strict fields map to OpenAPI types."""
    plugin.map_to_openapi_type(Whole, "integer", None)
    plugin.map_to_openapi_type(Number, "number", None)
    plugin.map_to_openapi_type(Flag, "boolean", None)
    plugin.map_to_openapi_type(Choice, "string", None)
    plugin.map_to_openapi_type(Text, "string", None)
    plugin.map_to_openapi_type(CellWord, "string", None)
