"""Simulation data models: one schema per distribution family, one data shape per cell.

A distribution is ``{"family": name, ...parameters}``; ``DataModel`` picks the shape (control
and treatment, a list of groups, one group, the paired differences) from the cell of the
question it sits in.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from marshmallow import Schema, ValidationError, fields, validates_schema

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
from .shared import per_design, shared

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
# A data model's keys come from the design's simulation model (``data_keys``); the families it
# may use follow from the outcome's word (binary outcomes are Bernoulli draws, event times
# Weibull or exponential), unless the simulation model lists its own (``families``).
OUTCOME_FAMILIES: dict[str, tuple[str, ...]] = {
    "binary": ("bernoulli",),
    "time_to_event": ("weibull", "exponential"),
    "association": (),
}


def families_for(design: Any) -> tuple[str, ...]:
    """Distribution families a cell's data model may use (none: it takes no data model)."""
    sim = getattr(design, "simulation", None)
    declared = getattr(sim, "families", None)
    if declared is not None:
        return tuple(declared)
    return OUTCOME_FAMILIES.get(design.outcome, CONTINUOUS_AND_COUNT)


def data_keys(design: Any) -> tuple[str, ...]:
    """The keys of a cell's data model: control/treatment, groups, group or differences."""
    return tuple(getattr(getattr(design, "simulation", None), "data_keys", ()) or ())


def takes_data(design: Any) -> bool:
    """True when the cell simulates and accepts a posted data model."""
    return (
        getattr(design, "simulation", None) is not None
        and bool(families_for(design))
        and bool(data_keys(design))
    )


class DistributionBase(Strict):
    """Common checks of a data-model distribution."""

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
                f"the {data['family']} distribution's mean or variance overflows double precision with "
                f"{', '.join(f'{n}={show(data[n])}' for n in names)}; use smaller parameters "
                "(or other units)"
            )
            raise ValidationError({n: [message] for n in names})


def _family_schema(family: str) -> type[Schema]:
    spec: dict[str, fields.Field] = {
        "family": Choice((family,), required=True, description="distribution family")
    }
    for name, (interval, desc) in FAMILY_PARAMS[family].items():
        spec[name] = Number(interval, required=True, description=desc)
    return DistributionBase.from_dict(
        spec, name=f"{family.title().replace('_', '')}DistributionSchema"
    )


FAMILY_SCHEMAS: dict[str, type[Schema]] = {f: _family_schema(f) for f in FAMILIES}


class Distribution(fields.Dict):
    """One distribution of a data model, dispatched on its ``family`` to the family's schema."""

    def __init__(self, families: tuple[str, ...] = FAMILIES, **kwargs: Any):
        self.families = families
        super().__init__(
            metadata={
                "description": "a distribution: {'family': name, ...parameters}; families: "
                + ", ".join(families)
            },
            **kwargs,
        )
        self.error_messages["required"] = (
            "is required: a distribution, an object with family and its parameters"
        )

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, Mapping):
            raise ValidationError(f"must be an object {{'family': ..., ...}}; {got(value)}")
        family = value.get("family")
        if not isinstance(family, str) or family not in self.families:
            raise ValidationError(
                {"family": [f"must be one of {', '.join(self.families)}; {got(family)}"]}
            )
        return shared(FAMILY_SCHEMAS[family]).load(value)


class DistributionList(fields.List):
    """The ``groups`` list of a k-group data model, one distribution per group."""

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, list) or len(value) < 2:
            raise ValidationError(f"must be a list of at least 2 distributions; {got(value)}")
        return super()._deserialize(value, attr, data, **kwargs)


@per_design
def data_schema(design: Any) -> Schema | None:
    """The shared schema of a cell's data model, or None when the cell takes none."""
    if not takes_data(design):
        return None
    fams, keys = families_for(design), data_keys(design)
    if keys == ("groups",):
        spec: dict[str, fields.Field] = {
            "groups": DistributionList(Distribution(fams), required=True)
        }
    else:
        spec = {k: Distribution(fams, required=True) for k in keys}
    name = f"{design.outcome.title()}{design.layout.title()}Data".replace("_", "")
    return Strict.from_dict(spec, name=name)()


class DataModel(fields.Dict):
    """A simulation data model, shaped by the cell of the question it sits in."""

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        design = getattr(self.parent, "cell", None)
        if design is None:
            if not isinstance(value, Mapping):
                raise ValidationError(f"must be an object; {got(value)}")
            return dict(value)  # the cell is invalid and already reported
        schema = data_schema(design)
        if schema is None:
            raise ValidationError(
                f"is not offered for {design.outcome} × {design.layout} (the simulation draws "
                f"its data from the effect and assumptions); remove it; {got(value)}"
            )
        if not isinstance(value, Mapping):
            keys = ", ".join(schema.fields)
            raise ValidationError(f"must be an object with keys {keys}; {got(value)}")
        return schema.load(value)
