"""Simulation data models: one arm schema per distribution family, one data shape per design.

An arm is ``{"family": name, ...parameters}``; ``DataModel`` picks the shape (two arms, groups
or one sample) from the design of the question it sits in.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from marshmallow import Schema, ValidationError, fields, validates_schema

from service.engine.designs import DESIGN_NAMES

from .fields import (
    POSITIVE,
    REAL,
    UNIT_HALF_OPEN,
    UNIT_OPEN,
    Choice,
    Interval,
    Number,
    Strict,
    got,
    number_text,
    show,
)
from .shared import shared

# Parameter name -> (interval, description). Order is the documented order.
FAMILY_PARAMS: dict[str, dict[str, tuple[Interval, str]]] = {
    "normal": {"mean": (REAL, "mean"), "sd": (POSITIVE, "standard deviation")},
    "lognormal": {
        "mu": (REAL, "mean of the log"),
        # Above 10 the variance is over e^100 times the squared median: draws overflow the sums
        # every test statistic takes, so no answer could be computed.
        "sigma": (Interval(0, 10, low_open=True), "standard deviation of the log"),
    },
    "gamma": {"shape": (POSITIVE, "shape k"), "scale": (POSITIVE, "scale theta")},
    "student_t": {
        "df": (POSITIVE, "degrees of freedom"),
        "loc": (REAL, "location"),
        "scale": (POSITIVE, "scale"),
    },
    "contaminated_normal": {
        "mean": (REAL, "mean"),
        "sd": (POSITIVE, "standard deviation of the main component"),
        "contamination": (UNIT_HALF_OPEN, "share of draws from the wide component"),
        "sd_factor": (Interval(1, None), "SD of the wide component / sd"),
    },
    "uniform": {"low": (REAL, "lower end"), "high": (REAL, "upper end, above low")},
    "exponential": {"scale": (POSITIVE, "scale (mean) 1/rate")},
    "cauchy": {
        "loc": (REAL, "location (median)"),
        "scale": (POSITIVE, "half-width at half-maximum"),
    },
    "bernoulli": {"p": (UNIT_OPEN, "probability of the event")},
    "poisson": {"mean": (POSITIVE, "mean count")},
    "negative_binomial": {
        "mean": (POSITIVE, "mean count"),
        "dispersion": (POSITIVE, "dispersion k (variance = mean + mean^2 / k)"),
    },
    "weibull": {"shape": (POSITIVE, "shape k"), "scale": (POSITIVE, "scale lambda")},
}
FAMILIES = tuple(FAMILY_PARAMS)
CONTINUOUS_AND_COUNT = tuple(f for f in FAMILIES if f != "bernoulli")
ARM_FAMILIES = {
    "two_proportions": ("bernoulli",),
    "survival_logrank": ("weibull", "exponential"),
}
DATA_SHAPES = {
    "two_means": "two_arm",
    "two_proportions": "two_arm",
    "rank_sum": "two_arm",
    "survival_logrank": "two_arm",
    "anova_oneway": "groups",
    "one_mean": "sample",
    "paired_mean": "sample",
    "correlation": None,  # bivariate normal pairs are drawn from r; no data model is taken
}


def families_for(design: str) -> tuple[str, ...]:
    """Distribution families a design's data model may use."""
    return ARM_FAMILIES.get(design, CONTINUOUS_AND_COUNT)


class ArmBase(Strict):
    """Common checks of a data-model arm."""

    @validates_schema(skip_on_field_errors=True)
    def _uniform_order(self, data: dict, **kwargs: Any) -> None:
        if "low" in data and "high" in data and not data["low"] < data["high"]:
            raise ValidationError(
                {"high": [f"must be > low ({number_text(data['low'])}); got {show(data['high'])}"]}
            )

    @validates_schema(skip_on_field_errors=True)
    def _finite_moments(self, data: dict, **kwargs: Any) -> None:
        # Parameters each in range can still give a mean or variance past double precision
        # (e.g. a normal sd of 1e200); the simulation could not compute with them.
        from service.engine.models import moments

        try:
            values = moments(data)
            finite = all(v is None or math.isfinite(v) for v in values)
        except (OverflowError, ValueError, ZeroDivisionError):
            finite = False
        if not finite:
            names = [n for n in FAMILY_PARAMS[data["family"]] if n in data]
            message = (
                f"the {data['family']} arm's mean or variance overflows double precision with "
                f"{', '.join(f'{n}={show(data[n])}' for n in names)}; use smaller parameters "
                "(or other units)"
            )
            raise ValidationError({n: [message] for n in names})


def _arm_schema(family: str) -> type[Schema]:
    spec: dict[str, fields.Field] = {
        "family": Choice((family,), required=True, description="distribution family")
    }
    for name, (interval, desc) in FAMILY_PARAMS[family].items():
        spec[name] = Number(interval, required=True, description=desc)
    return ArmBase.from_dict(spec, name=f"{family.title().replace('_', '')}ArmSchema")


ARM_SCHEMAS: dict[str, type[Schema]] = {f: _arm_schema(f) for f in FAMILIES}


class Arm(fields.Dict):
    """One arm of a data model, dispatched on its ``family`` to the family's schema."""

    def __init__(self, families: tuple[str, ...] = FAMILIES, **kwargs: Any):
        self.families = families
        super().__init__(
            metadata={
                "description": "an arm: {'family': name, ...parameters}; families: "
                + ", ".join(families)
            },
            **kwargs,
        )
        self.error_messages["required"] = (
            "is required: an arm, an object with family and its parameters"
        )

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, Mapping):
            raise ValidationError(f"must be an object {{'family': ..., ...}}; {got(value)}")
        family = value.get("family")
        if not isinstance(family, str) or family not in self.families:
            raise ValidationError(
                {"family": [f"must be one of {', '.join(self.families)}; {got(family)}"]}
            )
        return shared(ARM_SCHEMAS[family]).load(value)


class ArmList(fields.List):
    """The ``groups`` list of an ANOVA data model."""

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, list) or len(value) < 2:
            raise ValidationError(f"must be a list of at least 2 arms; {got(value)}")
        return super()._deserialize(value, attr, data, **kwargs)


def _data_schema(design: str) -> type[Schema] | None:
    shape, fams = DATA_SHAPES[design], families_for(design)
    if shape == "two_arm":
        spec = {"control": Arm(fams, required=True), "treatment": Arm(fams, required=True)}
    elif shape == "groups":
        spec = {"groups": ArmList(Arm(fams), required=True)}
    elif shape == "sample":
        spec = {"sample": Arm(fams, required=True)}
    else:
        return None
    return Strict.from_dict(spec, name=f"{design.title().replace('_', '')}DataSchema")


DATA_SCHEMAS = {d: _data_schema(d) for d in DESIGN_NAMES}


class DataModel(fields.Dict):
    """A simulation data model, shaped by the design of the question it sits in."""

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        design = getattr(self.parent, "design", None)
        if design is None:
            if not isinstance(value, Mapping):
                raise ValidationError(f"must be an object; {got(value)}")
            return dict(value)  # the design is invalid and already reported
        schema = DATA_SCHEMAS[design]
        if schema is None:
            raise ValidationError(
                f"not offered for {design} (pairs are drawn bivariate normal with effect.r); "
                f"remove it; {got(value)}"
            )
        if not isinstance(value, Mapping):
            keys = ", ".join(schema._declared_fields)
            raise ValidationError(f"must be an object with keys {keys}; {got(value)}")
        return schema().load(value)
