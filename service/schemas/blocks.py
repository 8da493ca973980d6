"""The nested blocks of a question: sample size, hypothesis, adjustments and simulation."""

from __future__ import annotations

from typing import Any

from marshmallow import ValidationError, missing, post_load, validates_schema

from .data_models import DataModel
from .fields import (
    UNIT_HALF_OPEN,
    Choice,
    Flag,
    Interval,
    Number,
    NumberList,
    Obj,
    Strict,
    Whole,
    posted,
    show,
)
from .shared import per_design
from .vocabulary import AIMS, DECISION_RULES, MAX_N, SEED_LIMIT, cell_of


class SampleSizeSchema(Strict):
    """Enrolled numbers: ``per_group`` (control first) or a ``total`` split by the allocation."""

    exactly_one = ("per_group", "total")  # the JSON Schema says it too

    per_group = NumberList(
        Whole(Interval(2, MAX_N), required=True, description="enrolled subjects in one group"),
        min_length=1,
        description="enrolled subjects per group, control (or the first group) first",
    )
    total = Whole(
        Interval(2, MAX_N), description="total enrolled; split over the groups by the allocation"
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _one_form(self, data: dict, original_data: Any, **kwargs: Any) -> None:
        has_list, has_total = posted(original_data, "per_group"), posted(original_data, "total")
        if has_list and has_total:
            raise ValidationError({"total": ["give per_group or total, not both; got both"]})
        if not has_list and not has_total:
            raise ValidationError(
                {"per_group": ["is required: a list of whole numbers >= 2 (or give total)"]}
            )


class HypothesisSchema(Strict):
    """Superiority, noninferiority or equivalence, with its margin on the effect's scale; or
    estimation, with the confidence interval's half-width, confidence and assurance."""

    aim = Choice(
        AIMS,
        load_default="superiority",
        description="what the study aims to show; estimation asks for the n that makes a "
        "confidence interval narrow enough (half_width, confidence, assurance)",
    )
    margin = Number(
        description="noninferiority margin (< 0 when higher is better, > 0 otherwise) or "
        "equivalence margin (> 0; bounds are +/- margin), on the treatment - control scale"
    )
    higher_is_better = Flag(
        default=True,
        description="true when larger outcomes are better; a one-sided superiority question "
        "that leaves it out takes the direction of its effect, and one contradicting it is refused",
    )
    half_width = Number(
        Interval(0, None, low_open=True),
        load_default=missing,
        description="estimation only: the largest acceptable half-width of the two-sided "
        "confidence interval, on the estimand's own scale (outcome units for a mean, a "
        "proportion for a proportion); required for find = sample_size",
    )
    confidence = Number(
        Interval(0.5, 1, low_open=True, high_open=True),
        load_default=missing,
        description="estimation only: the confidence level of the interval; default 0.95",
    )
    assurance = Number(
        Interval(0.5, 1, low_open=True, high_open=True),
        load_default=missing,
        description="estimation only: the probability that the half-width is at most "
        "half_width (Kupper & Hafner 1989); absent or null: the expected half-width is at most "
        "half_width",
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _estimation(self, data: dict, original: Any, **kwargs: Any) -> None:
        aim = data.get("aim")
        if aim is None:
            return  # the aim failed its own check
        errors: dict[str, list[str]] = {}
        if aim == "estimation":
            for name, why in (
                ("margin", "there is no hypothesis to test against a margin"),
                ("higher_is_better", "an interval has no direction"),
            ):
                if posted(original, name):
                    errors[name] = [
                        f"does not apply when aim is estimation ({why}); remove it; "
                        f"got {show(original[name])}"
                    ]
        else:
            for name in ESTIMATION_FIELDS:
                if posted(original, name):
                    errors[name] = [
                        'applies only when aim is "estimation" (a precision question); '
                        f"got {show(original[name])} with aim {show(aim)}"
                    ]
        if errors:
            raise ValidationError(errors)

    @validates_schema(skip_on_field_errors=False)
    def _margin(self, data: dict, **kwargs: Any) -> None:
        if "aim" not in data or data["aim"] == "estimation":
            return  # the aim failed its own check, or estimation (checked above)
        aim, margin = data["aim"], data.get("margin")
        if aim == "superiority":
            if margin is not None:
                raise ValidationError(
                    {
                        "margin": [
                            f"applies only to noninferiority or equivalence; got {show(margin)}"
                        ]
                    }
                )
            return
        if margin is None:
            if "margin" in data:  # posted null, or absent: both mean no margin
                need = {
                    "noninferiority": "a number < 0 (> 0 when higher_is_better is false)",
                    "equivalence": "a number > 0",
                }[aim]
                raise ValidationError({"margin": [f"is required for {aim}: {need}"]})
            return  # the margin failed its own type check and is reported there
        if aim == "equivalence" and not margin > 0:
            raise ValidationError(
                {
                    "margin": [
                        f"must be > 0 for equivalence (bounds are +/- margin); got {show(margin)}"
                    ]
                }
            )
        if aim == "noninferiority":
            hib = data.get("higher_is_better", True)
            if hib and not margin < 0:
                raise ValidationError(
                    {
                        "margin": [
                            "must be < 0 for noninferiority when higher_is_better is true; "
                            f"got {show(margin)}"
                        ]
                    }
                )
            if hib is False and not margin > 0:
                raise ValidationError(
                    {
                        "margin": [
                            "must be > 0 for noninferiority when higher_is_better is false; "
                            f"got {show(margin)}"
                        ]
                    }
                )


ESTIMATION_FIELDS = ("half_width", "confidence", "assurance")
DEFAULT_CONFIDENCE = 0.95  # common practice, no source


class ClusterSchema(Strict):
    """Cluster randomization: design effect 1 + ((cv² + 1)·mean_size − 1)·icc, whole clusters."""

    exactly_one = ("mean_size", "clusters_per_group")  # the JSON Schema says it too

    mean_size = Number(
        Interval(1, None),
        description="mean cluster size (people enrolled per cluster); required unless "
        "clusters_per_group is given to solve for it",
    )
    icc = Number(UNIT_HALF_OPEN, required=True, description="intracluster correlation")
    cv = Number(
        Interval(0, 10),
        default=0.0,
        description="coefficient of variation of cluster size (0: equal clusters)",
    )
    clusters_per_group = Whole(
        Interval(2, 100_000),
        description="fixed clusters per group: find = sample_size then solves for the cluster size",
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _size(self, data: dict, original: Any, **kwargs: Any) -> None:
        if not posted(original, "mean_size") and not posted(original, "clusters_per_group"):
            raise ValidationError(
                {"mean_size": ["is required (or give clusters_per_group to solve for it)"]}
            )
        if posted(original, "mean_size") and posted(original, "clusters_per_group"):
            raise ValidationError(
                {
                    "clusters_per_group": [
                        "cannot be given with mean_size: give mean_size to solve for the number "
                        "of clusters, or clusters_per_group to solve for the cluster size; got "
                        f"{show(original['clusters_per_group'])}"
                    ]
                }
            )


class AdjustmentsSchema(Strict):
    """Inflation for dropout and clustering, and a Bonferroni split of alpha."""

    dropout = Number(
        UNIT_HALF_OPEN,
        default=0.0,
        description="expected share lost; n is divided by (1 - dropout)",
    )
    cluster = Obj(ClusterSchema, description="cluster sampling, or null for none")
    comparisons = Whole(
        Interval(1, 10_000), default=1, description="number of comparisons; alpha is divided by it"
    )
    multiplicity = Choice(
        ("bonferroni", "holm", "hochberg"),
        description="procedure across the comparisons: bonferroni (the size's split of alpha), "
        "or holm (step-down) / hochberg (step-up), whose power at the Bonferroni size is "
        "simulated for k identical comparisons; only when posted",
    )
    comparisons_correlation = Number(
        UNIT_HALF_OPEN,
        allow_none=True,
        description="correlation of the comparisons' z statistics (equicorrelated, ≥ 0) for the "
        "holm and hochberg power; 0 (independent) when omitted",
    )

    @post_load
    def _only_when_posted(self, data: dict, **kwargs: Any) -> dict:
        # the normalized question gains these keys only when posted (records keep their digits)
        for name in ("multiplicity", "comparisons_correlation"):
            if data.get(name) is None:
                data.pop(name, None)
        return data


class SimulationSchema(Strict):
    """Monte Carlo settings; ``data`` is checked against the question's cell."""

    replicates = Whole(
        Interval(200, 2_000_000),
        default=10_000,
        description="Monte Carlo replicates for the answer",
    )
    seed = Whole(
        Interval(0, SEED_LIMIT, high_open=True, text="[0, 2**53)"),
        description="root seed; null draws one from the OS entropy pool",
    )
    data = DataModel(
        allow_none=True,
        load_default=None,
        metadata={
            "description": "the data model; null draws the cell's own data from the effect and "
            "assumptions"
        },
    )
    decision_rule = Choice(
        DECISION_RULES,
        load_default="point",
        description="point: simulated power >= target; lower_bound: its 95% lower bound >= target",
    )
    chunk_size = Whole(
        Interval(100, 100_000),
        default=1000,
        description="replicates per chunk (one random stream each)",
    )
    search_replicates = Whole(
        Interval(200, 2_000_000),
        default=2000,
        description="replicates per candidate n in the search",
    )

    def __init__(self, *, cell: Any = None, **kwargs: Any):
        self.cell = cell  # the cell's design object: shapes ``data``
        super().__init__(**kwargs)


@per_design
def simulation_schema(design: Any) -> SimulationSchema:
    """The shared simulation schema of a cell (None: the cell is unknown)."""
    return SimulationSchema(cell=design)


class SimulationField(Obj):
    """The ``simulation`` block, validated against the question's cell."""

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        self.check_object(value)
        return simulation_schema(cell_of(data)).load(value)


def _interim_schema() -> type[Strict]:
    """The ``interim`` block, its fields generated from the engine's declarations."""
    from service.engine.designs import interim

    from .declared import marshmallow_field

    spec = {f.name: marshmallow_field(f) for f in interim.FIELDS}
    spec["looks"].required = True
    spec["looks"].error_messages["required"] = (
        f"is required: a whole number of analyses between 1 and {interim.MAX_LOOKS}"
    )

    class InterimSchema(Strict.from_dict(spec, name="InterimBase")):  # type: ignore[misc]
        """Planned interim analyses: boundaries by alpha spending, optional futility."""

        @validates_schema(pass_original=True, skip_on_field_errors=True)
        def _across(self, data: dict, original: Any, **kwargs: Any) -> None:
            errors = interim.check(dict(original) if isinstance(original, dict) else data)
            if errors:
                raise ValidationError(
                    {path.split(".", 1)[1]: messages for path, messages in errors.items()}
                )

    return InterimSchema


InterimSchema = _interim_schema()


def _assurance_schema() -> type[Strict]:
    """The question's ``assurance`` block, from the engine's declarations (declared once)."""
    from service.engine.assurance import FIELDS

    from .declared import marshmallow_field

    attrs = {f.name: marshmallow_field(f) for f in FIELDS}
    attrs["__doc__"] = (
        "A normal (or truncated normal) prior on the cell's effect field: the record gives "
        "the assurance, the power averaged over it, beside the power (O'Hagan et al. 2005)."
    )
    return type("AssuranceSchema", (Strict,), attrs)


AssuranceSchema = _assurance_schema()
