"""The nested blocks of a question: sample size, hypothesis, adjustments and simulation."""

from __future__ import annotations

from typing import Any

from marshmallow import ValidationError, validates_schema

from service.engine.designs import TESTS

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
    Text,
    Whole,
    got,
    posted,
    show,
)
from .shared import shared
from .vocabulary import DECISION_RULES, KINDS, MAX_N, SEED_LIMIT, valid_design


class SampleSizeSchema(Strict):
    """Enrolled numbers: ``per_arm`` (control first) or a ``total`` split by the allocation."""

    per_arm = NumberList(
        Whole(Interval(2, MAX_N), required=True, description="enrolled subjects in one arm"),
        min_length=1,
        description="enrolled subjects per arm, control (or first group) first",
    )
    total = Whole(
        Interval(2, MAX_N), description="total enrolled; split over the arms by the allocation"
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _one_form(self, data: dict, original_data: Any, **kwargs: Any) -> None:
        has_arm, has_total = posted(original_data, "per_arm"), posted(original_data, "total")
        if has_arm and has_total:
            raise ValidationError({"total": ["give per_arm or total, not both; got both"]})
        if not has_arm and not has_total:
            raise ValidationError(
                {"per_arm": ["is required: a list of whole numbers >= 2 (or give total)"]}
            )


class HypothesisSchema(Strict):
    """Superiority, non-inferiority or equivalence, with its margin on the effect's scale."""

    kind = Choice(KINDS, load_default="superiority", description="the hypothesis to be shown")
    margin = Number(
        description="non-inferiority margin (< 0 when higher is better, > 0 otherwise) or "
        "equivalence margin (> 0; bounds are +/- margin), on the treatment - control scale"
    )
    higher_is_better = Flag(
        default=True,
        description="true when larger outcomes are better; a one-sided superiority question "
        "that leaves it out takes the direction of its effect, and one contradicting it is refused",
    )

    @validates_schema(skip_on_field_errors=False)
    def _margin(self, data: dict, **kwargs: Any) -> None:
        if "kind" not in data:
            return  # the kind failed its own check
        kind, margin = data["kind"], data.get("margin")
        if kind == "superiority":
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
                }[kind]
                raise ValidationError({"margin": [f"is required for {kind}: {need}"]})
            return  # the margin failed its own type check and is reported there
        if kind == "equivalence" and not margin > 0:
            raise ValidationError(
                {
                    "margin": [
                        f"must be > 0 for equivalence (bounds are +/- margin); got {show(margin)}"
                    ]
                }
            )
        if kind == "noninferiority":
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


class ClusterSchema(Strict):
    """Cluster randomization: design effect 1 + ((cv² + 1)·mean_size − 1)·icc, whole clusters."""

    mean_size = Number(
        Interval(1, None),
        description="mean cluster size (people enrolled per cluster); required unless "
        "clusters_per_arm is given to solve for it",
    )
    icc = Number(UNIT_HALF_OPEN, required=True, description="intracluster correlation")
    cv = Number(
        Interval(0, 10),
        default=0.0,
        description="coefficient of variation of cluster size (0: equal clusters)",
    )
    clusters_per_arm = Whole(
        Interval(2, 100_000),
        description="fixed clusters per arm: find = sample_size then solves for the cluster size",
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _size(self, data: dict, original: Any, **kwargs: Any) -> None:
        if not posted(original, "mean_size") and not posted(original, "clusters_per_arm"):
            raise ValidationError(
                {"mean_size": ["is required (or give clusters_per_arm to solve for it)"]}
            )
        if posted(original, "mean_size") and posted(original, "clusters_per_arm"):
            raise ValidationError(
                {
                    "clusters_per_arm": [
                        "cannot be given with mean_size: give mean_size to solve for the number "
                        "of clusters, or clusters_per_arm to solve for the cluster size; got "
                        f"{show(original['clusters_per_arm'])}"
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


class SimulationSchema(Strict):
    """Monte Carlo settings; ``data`` and ``test`` are checked against the question's design."""

    replicates = Whole(
        Interval(200, 2_000_000),
        default=10_000,
        description="Monte Carlo replicates for the answer",
    )
    seed = Whole(
        Interval(0, SEED_LIMIT, high_open=True, text="[0, 2**53)"),
        description="root seed; null draws one from the OS entropy pool",
    )
    test = Text(
        description="the test applied to each simulated data set; default the design's first"
    )
    data = DataModel(
        allow_none=True,
        load_default=None,
        metadata={"description": "the data model; null uses normal data built from the effect"},
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

    def __init__(self, *, design: str | None = None, **kwargs: Any):
        self.design = design
        super().__init__(**kwargs)

    @validates_schema(skip_on_field_errors=False)
    def _fits_design(self, data: dict, **kwargs: Any) -> None:
        test = data.get("test")
        if self.design is not None and test is not None and test not in TESTS[self.design]:
            raise ValidationError(
                {
                    "test": [
                        f"must be one of {', '.join(TESTS[self.design])} for {self.design}; {got(test)}"
                    ]
                }
            )


class SimulationField(Obj):
    """The ``simulation`` block, validated against the question's design."""

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        self.check_object(value)
        return shared(SimulationSchema, design=valid_design(data)).load(value)
