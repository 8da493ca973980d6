"""Effect fields: one schema per design, and the values derived from what was posted.

Each schema accepts the documented forms of its block (``FORMS``), refuses the field solved for
when find = effect (``SOLVED``) and normalizes: a common sd fills both arms, sd + correlation
give sd_difference, group means + sd give Cohen's f, a median gives the control hazard.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from marshmallow import ValidationError, fields, post_load, validates_schema

from .fields import (
    CORR,
    NONNEG,
    POSITIVE,
    UNIT_OPEN,
    Flag,
    Interval,
    Number,
    NumberList,
    Strict,
    Whole,
    got,
    posted,
    raise_errors,
    show,
)
from .shared import shared
from .vocabulary import valid_design, valid_find


class EffectBase(Strict):
    """Common machinery: ``SOLVED`` is the field solved for when find = effect."""

    SOLVED: str = ""
    # The accepted ways to post the block, for the catalogue (the solved field drops out
    # when find = effect).
    FORMS: tuple = ()
    # Fields a posted simulation data model implies (the engine derives them from the arms),
    # so they are optional when one is posted.
    MODEL_FIELDS: tuple = ()

    def __init__(self, *, find: str = "sample_size", from_data: bool = False, **kwargs: Any):
        self.find = find
        self.from_data = from_data
        super().__init__(**kwargs)

    def need(self, errors: dict, original: Any, *names: str) -> None:
        """Record 'is required' for each of ``names`` not posted (nor implied by a data model)."""
        for name in names:
            if self.from_data and name in self.MODEL_FIELDS:
                continue
            if not posted(original, name):
                errors.setdefault(name, []).append(self.fields[name].required_message())

    def forbid(self, errors: dict, original: Any, name: str, why: str) -> None:
        """Record an error when ``name`` was posted although it must not be."""
        if posted(original, name):
            errors.setdefault(name, []).append(f"{why}; got {show(original[name])}")

    def solved(self, errors: dict, original: Any) -> None:
        """Handle the solved-for field: forbidden for find = effect, required otherwise."""
        if self.find == "effect":
            self.forbid(
                errors, original, self.SOLVED, "is solved for when find = effect; remove it"
            )
        else:
            self.need(errors, original, self.SOLVED)

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _required(self, data: dict, original_data: Any, **kwargs: Any) -> None:
        errors: dict = {}
        self.solved(errors, original_data)
        self.rules(errors, data, original_data)
        raise_errors(errors)

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        """Design-specific presence and consistency rules."""

    def normalize(self, data: dict) -> dict:
        """Return the normalized effect block."""
        return {k: v for k, v in data.items() if v is not None}

    @post_load
    def _normalize(self, data: dict, **kwargs: Any) -> dict:
        return self.normalize(data)


class TwoMeansEffectSchema(EffectBase):
    """Two independent means: difference (treatment - control) and the SDs."""

    FORMS = ("difference, sd", "difference, sd_control, sd_treatment")
    SOLVED = "difference"
    MODEL_FIELDS = ("difference", "sd", "sd_control", "sd_treatment")
    difference = Number(description="expected mean difference, treatment - control")
    sd = Number(
        POSITIVE, description="common standard deviation (fills sd_control and sd_treatment)"
    )
    sd_control = Number(POSITIVE, description="standard deviation in the control arm")
    sd_treatment = Number(POSITIVE, description="standard deviation in the treatment arm")

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        if posted(original, "sd"):
            for name in ("sd_control", "sd_treatment"):
                self.forbid(
                    errors, original, name, "give sd or sd_control + sd_treatment, not both"
                )
        elif posted(original, "sd_control") or posted(original, "sd_treatment"):
            self.need(errors, original, "sd_control", "sd_treatment")
        else:
            self.need(errors, original, "sd")

    def normalize(self, data: dict) -> dict:
        out = {}
        if data.get("difference") is not None:
            out["difference"] = data["difference"]
        sd = data.get("sd")
        for name in ("sd_control", "sd_treatment"):
            value = sd if sd is not None else data.get(name)
            if value is not None:  # absent only when a data model implies it
                out[name] = value
        return out


class OneMeanEffectSchema(EffectBase):
    """One mean against a null value."""

    FORMS = ("difference, sd",)
    SOLVED = "difference"
    MODEL_FIELDS = ("difference", "sd")
    difference = Number(description="expected mean minus the null value")
    sd = Number(POSITIVE, description="standard deviation of one observation")

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        self.need(errors, original, "sd")


class PairedMeanEffectSchema(EffectBase):
    """Paired means: the mean of the differences and their SD (or SD + within-pair correlation)."""

    FORMS = ("difference, sd_difference", "difference, sd, correlation")
    SOLVED = "difference"
    MODEL_FIELDS = ("difference", "sd_difference", "sd", "correlation")
    difference = Number(description="expected mean of the within-pair differences")
    sd_difference = Number(
        POSITIVE, description="standard deviation of the within-pair differences"
    )
    sd = Number(
        POSITIVE, description="SD of one measurement (with correlation gives sd_difference)"
    )
    correlation = Number(
        CORR, description="within-pair correlation rho; sd_difference = sd*sqrt(2(1-rho))"
    )

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        if posted(original, "sd_difference"):
            for name in ("sd", "correlation"):
                self.forbid(
                    errors, original, name, "give sd_difference or sd + correlation, not both"
                )
        elif posted(original, "sd") or posted(original, "correlation"):
            self.need(errors, original, "sd", "correlation")
        else:
            self.need(errors, original, "sd_difference")

    def normalize(self, data: dict) -> dict:
        out = {}
        if data.get("difference") is not None:
            out["difference"] = data["difference"]
        if data.get("sd_difference") is not None:
            out["sd_difference"] = data["sd_difference"]
        elif data.get("sd") is not None:
            out["sd_difference"] = data["sd"] * math.sqrt(2.0 * (1.0 - data["correlation"]))
        return out


class TwoProportionsEffectSchema(EffectBase):
    """Two independent proportions."""

    FORMS = ("p_control, p_treatment [, continuity_correction]",)
    SOLVED = "p_treatment"
    MODEL_FIELDS = ("p_control", "p_treatment")
    p_control = Number(UNIT_OPEN, description="event proportion in the control arm")
    p_treatment = Number(UNIT_OPEN, description="event proportion in the treatment arm")
    continuity_correction = Flag(default=False, description="apply the continuity correction")

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        self.need(errors, original, "p_control")


class AnovaEffectSchema(EffectBase):
    """One-way ANOVA: Cohen's f and the number of groups, or the group means and a common SD."""

    FORMS = ("cohens_f, groups", "group_means, sd")
    SOLVED = "cohens_f"
    cohens_f = Number(
        NONNEG,
        description="Cohen's f: SD of the group means around their size-weighted mean, each "
        "weighted by its share of N (divisor k for equal groups) / within SD",
    )
    groups = Whole(Interval(2, 1000), description="number of groups")
    group_means = NumberList(
        Number(required=True, description="one group's mean"),
        min_length=2,
        description="expected group means (with sd gives cohens_f and groups)",
    )
    sd = Number(POSITIVE, description="common within-group standard deviation")

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        errors.pop("cohens_f", None)  # may come from group_means instead
        has_means = posted(original, "group_means")
        if self.find == "effect":
            self.forbid(errors, original, "cohens_f", "is solved for when find = effect; remove it")
            self.forbid(
                errors,
                original,
                "group_means",
                "cannot be given when find = effect (cohens_f is solved for)",
            )
            self.need(errors, original, "groups")
            return
        if has_means:
            self.need(errors, original, "sd")
            means = data.get("group_means")
            if (
                means is not None
                and data.get("groups") is not None
                and data["groups"] != len(means)
            ):
                errors.setdefault("groups", []).append(
                    f"must equal the number of group_means ({len(means)}); got {data['groups']}"
                )
            f = data.get("cohens_f")
            if means is not None and f is not None and data.get("sd") is not None:
                derived = _cohens_f(means, data["sd"])
                if not math.isclose(f, derived, rel_tol=1e-9, abs_tol=1e-12):
                    errors.setdefault("cohens_f", []).append(
                        f"disagrees with group_means and sd (which give {derived!r}); "
                        f"give one or the other; got {show(f)}"
                    )
        else:
            self.need(errors, original, "cohens_f", "groups")

    def normalize(self, data: dict) -> dict:
        out = {k: v for k, v in data.items() if v is not None}
        if data.get("group_means") is not None:
            out["cohens_f"] = _cohens_f(data["group_means"], data["sd"])
            out["groups"] = len(data["group_means"])
        return out


def _cohens_f(means: list[float], sd: float) -> float:
    k = len(means)
    grand = math.fsum(means) / k
    return math.sqrt(math.fsum((m - grand) ** 2 for m in means) / k) / sd


class CorrelationEffectSchema(EffectBase):
    """Pearson correlation against a null value r0 (Fisher z)."""

    FORMS = ("r [, r0]",)
    SOLVED = "r"
    r = Number(CORR, description="expected correlation")
    r0 = Number(CORR, default=0.0, description="correlation under the null hypothesis")


class RankSumEffectSchema(EffectBase):
    """Rank-sum: P(Y > X) with Y from the treatment arm (or a data model under simulation)."""

    FORMS = ("prob_superiority", "nothing, with a simulation.data model")
    SOLVED = "prob_superiority"
    prob_superiority = Number(UNIT_OPEN, description="P(Y > X), Y treatment, X control")

    def solved(self, errors: dict, original: Any) -> None:
        # Required-ness depends on the data model, decided by the question schema.
        if self.find == "effect":
            super().solved(errors, original)


class SurvivalEffectSchema(EffectBase):
    """Log-rank: hazard ratio, control hazard (from a median or a rate), accrual and follow-up."""

    FORMS = (
        "hazard_ratio, median_control | event_rate_control, accrual_period, follow_up [, loss_rate]",
    )
    SOLVED = "hazard_ratio"
    hazard_ratio = Number(POSITIVE, description="hazard ratio, treatment / control")
    median_control = Number(
        POSITIVE, description="median survival in control; hazard = ln 2 / median"
    )
    event_rate_control = Number(POSITIVE, description="constant control hazard per time unit")
    hazard_control = Number(
        POSITIVE, description="constant control hazard per time unit (normalized form)"
    )
    accrual_period = Number(NONNEG, description="uniform accrual duration")
    follow_up = Number(NONNEG, description="extra follow-up after accrual ends")
    loss_rate = Number(NONNEG, default=0.0, description="exponential hazard of loss to follow-up")

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        given = [
            n
            for n in ("median_control", "event_rate_control", "hazard_control")
            if posted(original, n)
        ]
        rates = [n for n in given if n != "median_control"]
        if not given:
            errors.setdefault("median_control", []).append(
                "is required: a number > 0 (or give event_rate_control)"
            )
        if len(rates) == 2:
            errors.setdefault("event_rate_control", []).append(
                "give event_rate_control or hazard_control, not both; got both"
            )
        if "median_control" in given and rates and data.get("median_control"):
            rate = data.get(rates[0])
            derived = math.log(2.0) / data["median_control"]
            if rate is not None and not math.isclose(rate, derived, rel_tol=1e-9):
                errors.setdefault(rates[0], []).append(
                    f"disagrees with median_control (ln 2 / median = {derived!r}); give one; "
                    f"got {show(rate)}"
                )
        self.need(errors, original, "accrual_period", "follow_up")
        a, f = data.get("accrual_period"), data.get("follow_up")
        if a is not None and f is not None and not a + f > 0:
            errors.setdefault("follow_up", []).append(
                f"accrual_period + follow_up must be > 0; got {show(a)} + {show(f)}"
            )

    def normalize(self, data: dict) -> dict:
        out = {k: data[k] for k in ("accrual_period", "follow_up", "loss_rate")}
        if data.get("hazard_ratio") is not None:
            out["hazard_ratio"] = data["hazard_ratio"]
        if data.get("median_control") is not None:
            out["median_control"] = data["median_control"]
            out["hazard_control"] = math.log(2.0) / data["median_control"]
        else:
            rate = data.get("event_rate_control")
            out["hazard_control"] = rate if rate is not None else data["hazard_control"]
        return out


EFFECT_SCHEMAS: dict[str, type[EffectBase]] = {
    "two_means": TwoMeansEffectSchema,
    "paired_mean": PairedMeanEffectSchema,
    "one_mean": OneMeanEffectSchema,
    "two_proportions": TwoProportionsEffectSchema,
    "anova_oneway": AnovaEffectSchema,
    "correlation": CorrelationEffectSchema,
    "rank_sum": RankSumEffectSchema,
    "survival_logrank": SurvivalEffectSchema,
}


class Effect(fields.Dict):
    """The design-specific effect block, dispatched on the question's ``design``."""

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        design = valid_design(data)
        if not isinstance(value, Mapping):
            keys = ", ".join(EFFECT_SCHEMAS[design]._declared_fields) if design else "per design"
            raise ValidationError(f"must be an object with keys {keys}; {got(value)}")
        if design is None:
            return dict(value)  # the design is invalid and reported on its own field
        find = valid_find(data)
        return shared(
            EFFECT_SCHEMAS[design], find=find, from_data=posts_data_model(data, find)
        ).load(value)


def posts_data_model(raw: Any, find: str | None) -> bool:
    """True when the raw question simulates a posted data model (its arms imply the effect)."""
    if not isinstance(raw, Mapping) or find == "effect":
        return False
    sim = raw.get("simulation")
    return (
        raw.get("method") == "simulation"
        and isinstance(sim, Mapping)
        and isinstance(sim.get("data"), Mapping)
    )
