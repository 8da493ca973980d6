"""The question schema: validate a posted sample-size question and return its normalized form.

``QuestionSchema().load(raw)`` returns the dict described in DEVELOPERS.md ("The question"),
every default filled in. ``load_question(raw)`` does the same but raises ``QuestionInvalid``
with dotted field paths, the shape the API and the CLI print.

Numbers are strict: JSON numbers only (no strings, no booleans, no NaN or infinity). Every
message names what is allowed and echoes the posted value. Ranges live in the fields' metadata
(``minimum``, ``exclusiveMinimum`` … in the JSON Schema 2020-12 / OpenAPI 3.1 form) so the
OpenAPI document and the design catalogue show the same limits the validator enforces.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from marshmallow import (
    EXCLUDE,
    Schema,
    ValidationError,
    fields,
    post_load,
    pre_load,
    validates_schema,
)

from service.engine.adjust import split_total
from service.engine.designs import DESIGN_NAMES, FORMULAS, TESTS

from .errors import QuestionInvalid

FINDS = ("sample_size", "power", "effect")
METHODS = ("analytic", "simulation")
KINDS = ("superiority", "noninferiority", "equivalence")
DECISION_RULES = ("point", "lower_bound")
TWO_ARM = ("two_means", "two_proportions", "rank_sum", "survival_logrank")
MARGIN_DESIGNS = ("two_means", "two_proportions")
SEED_LIMIT = 2**53
MAX_N = 10**9

# ---------------------------------------------------------------------------------------------
# Messages and intervals


def show(value: Any) -> str:
    """Render a posted value the way it was posted (JSON), shortened for messages."""
    try:
        text = json.dumps(value, allow_nan=True, sort_keys=True)
    except (TypeError, ValueError):
        text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def kind_of(value: Any) -> str:
    """Name the JSON type of a posted value, for type errors."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, (int, float)):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, Mapping):
        return "an object"
    if isinstance(value, (list, tuple)):
        return "a list"
    return type(value).__name__


def got(value: Any) -> str:
    """The '; got …' tail of a message: the value, plus its type when the type is the problem."""
    if isinstance(value, (bool, str)) or value is None or isinstance(value, (Mapping, list)):
        return f"got {show(value)} ({kind_of(value)})"
    return f"got {show(value)}"


def _num(x: float) -> str:
    if isinstance(x, int) or float(x).is_integer():
        return f"{int(x):,}" if abs(x) >= 1000 else str(int(x))
    return repr(float(x))


@dataclass(frozen=True)
class Interval:
    """A numeric range with open or closed ends; ``None`` ends are unbounded."""

    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    text: str | None = None  # a hand-written rendering, e.g. "[0, 2**53)"

    def contains(self, x: float) -> bool:
        """True when ``x`` lies in the interval."""
        if self.low is not None and (x <= self.low if self.low_open else x < self.low):
            return False
        if self.high is not None and (x >= self.high if self.high_open else x > self.high):
            return False
        return True

    def phrase(self) -> str:
        """Render as 'in (0, 0.5]', '> 0' or '>= 1' for messages."""
        if self.text:
            return f"in {self.text}"
        if self.low is not None and self.high is not None:
            lo = "(" if self.low_open else "["
            hi = ")" if self.high_open else "]"
            return f"in {lo}{_num(self.low)}, {_num(self.high)}{hi}"
        if self.low is not None:
            return f"{'>' if self.low_open else '>='} {_num(self.low)}"
        if self.high is not None:
            return f"{'<' if self.high_open else '<='} {_num(self.high)}"
        return ""

    def metadata(self) -> dict:
        """JSON Schema 2020-12 keywords for the interval (numeric exclusive bounds)."""
        meta: dict = {}
        if self.low is not None:
            meta["exclusiveMinimum" if self.low_open else "minimum"] = self.low
        if self.high is not None:
            meta["exclusiveMaximum" if self.high_open else "maximum"] = self.high
        return meta


POSITIVE = Interval(0, None, low_open=True)
NONNEG = Interval(0, None)
UNIT_OPEN = Interval(0, 1, low_open=True, high_open=True)
UNIT_HALF_OPEN = Interval(0, 1, high_open=True)
CORR = Interval(-1, 1, low_open=True, high_open=True)
REAL = Interval()


# ---------------------------------------------------------------------------------------------
# Strict fields


class Number(fields.Float):
    """A strict JSON number (no strings, booleans, NaN or infinity) inside an interval."""

    def __init__(
        self, interval: Interval = REAL, *, description: str, default: Any = None, **kwargs: Any
    ):
        self.interval = interval
        meta = {"description": description, **interval.metadata()}
        if default is not None:
            meta["default"] = default
        kwargs.setdefault("required", False)
        if not kwargs["required"]:
            kwargs.setdefault("load_default", default)
            kwargs.setdefault("allow_none", True)
        super().__init__(metadata=meta, **kwargs)
        self.error_messages["required"] = self.required_message()
        self.error_messages["null"] = self.required_message() + "; got null"

    def allowed(self) -> str:
        """What the field accepts, in words."""
        phrase = self.interval.phrase()
        return f"a number {phrase}".rstrip() if phrase else "a finite number"

    def required_message(self) -> str:
        """The message for a missing value."""
        return f"is required: {self.allowed()}"

    def _convert(self, value: Any) -> float:
        return float(value)

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValidationError(f"must be {self.allowed()}; {got(value)}")
        try:
            number = self._convert(value)
        except OverflowError as exc:
            raise ValidationError(f"must be {self.allowed()}; got a number too large") from exc
        if isinstance(number, float) and not math.isfinite(number):
            raise ValidationError(f"must be {self.allowed()} (finite); {got(value)}")
        if not self.interval.contains(number):
            phrase = self.interval.phrase() or "finite"
            raise ValidationError(f"must be {phrase}; {got(value)}")
        return number


class Whole(Number):
    """A strict JSON integer (an integral float such as 100.0 is accepted as 100)."""

    def allowed(self) -> str:
        """What the field accepts, in words."""
        phrase = self.interval.phrase()
        return f"a whole number {phrase}".rstrip()

    def _convert(self, value: Any) -> Any:
        if isinstance(value, float):
            if not math.isfinite(value) or not value.is_integer():
                raise ValidationError(f"must be {self.allowed()}; {got(value)}")
            return int(value)
        return value


class Choice(fields.String):
    """A string from a fixed list; the message lists the allowed values."""

    def __init__(self, choices: tuple, *, description: str, **kwargs: Any):
        self.choices = tuple(choices)
        meta = {"description": description, "enum": list(self.choices)}
        if kwargs.get("load_default") is not None:
            meta["default"] = kwargs["load_default"]
        if not kwargs.get("required"):
            kwargs.setdefault("allow_none", True)
            kwargs.setdefault("load_default", None)
        super().__init__(metadata=meta, **kwargs)
        self.error_messages["required"] = f"is required: one of {', '.join(self.choices)}"
        self.error_messages["null"] = self.error_messages["required"] + "; got null"

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, str) or value not in self.choices:
            raise ValidationError(f"must be one of {', '.join(self.choices)}; {got(value)}")
        return value


class Text(fields.String):
    """A strict JSON string (validated against a list elsewhere, where the list depends on design)."""

    def __init__(self, *, description: str, **kwargs: Any):
        kwargs.setdefault("allow_none", True)
        super().__init__(metadata={"description": description}, **kwargs)

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, str):
            raise ValidationError(f"must be a string; {got(value)}")
        return value


class Flag(fields.Boolean):
    """A strict JSON boolean (no 0/1, no 'true' strings)."""

    def __init__(self, *, description: str, default: bool, **kwargs: Any):
        super().__init__(
            metadata={"description": description, "default": default},
            load_default=default,
            allow_none=True,
            **kwargs,
        )

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, bool):
            raise ValidationError(f"must be true or false; {got(value)}")
        return value


class NumberList(fields.List):
    """A JSON list of strict numbers, with a minimum length."""

    def __init__(self, inner: Number, *, min_length: int, description: str, **kwargs: Any):
        self.min_length = min_length
        kwargs.setdefault("allow_none", True)
        super().__init__(
            inner, metadata={"description": description, "minItems": min_length}, **kwargs
        )

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if not isinstance(value, list):
            raise ValidationError(f"must be a list of {self.inner.allowed()}; {got(value)}")
        if len(value) < self.min_length:
            raise ValidationError(
                f"must list at least {self.min_length} values; got {len(value)}: {show(value)}"
            )
        return super()._deserialize(value, attr, data, **kwargs)


class Obj(fields.Nested):
    """A nested JSON object; a non-object gets a message naming the allowed keys."""

    def __init__(self, nested: type[Schema], *, description: str, **kwargs: Any):
        kwargs.setdefault("allow_none", True)
        kwargs.setdefault("load_default", None)
        super().__init__(nested, metadata={"description": description}, **kwargs)

    def keys_text(self) -> str:
        """The allowed keys of the nested object, for messages."""
        return ", ".join(self.nested._declared_fields)  # type: ignore[union-attr]

    def check_object(self, value: Any) -> None:
        """Refuse anything but a JSON object."""
        if not isinstance(value, Mapping):
            raise ValidationError(f"must be an object with keys {self.keys_text()}; {got(value)}")

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        self.check_object(value)
        return super()._deserialize(value, attr, data, **kwargs)


# ---------------------------------------------------------------------------------------------
# Base schema: unknown keys are refused with the list of allowed ones


_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


def posted(original: Any, name: str) -> bool:
    """True when ``name`` was posted with a non-null value."""
    return isinstance(original, Mapping) and original.get(name) is not None


class Strict(Schema):
    """Base schema: refuses unknown keys, naming the allowed ones."""

    class Meta:
        # Unknown keys are refused below, with a message that lists the allowed keys.
        unknown = EXCLUDE

    @pre_load
    def _null_is_absent(self, data: Any, **kwargs: Any) -> Any:
        # A posted null means "not given": the default applies (and a required field says so).
        if isinstance(data, Mapping):
            return {k: v for k, v in data.items() if v is not None}
        return data

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _refuse_unknown(self, data: dict, original_data: Any, **kwargs: Any) -> None:
        if not isinstance(original_data, Mapping):
            return
        allowed = {f.data_key or name for name, f in self.load_fields.items()}
        extra = [k for k in original_data if k not in allowed]
        if extra:
            names = ", ".join(sorted(allowed))
            errors: dict = {}
            for k in extra:
                # A key that is not a plain name would break the dotted path: report it on
                # the object that holds it.
                where = k if isinstance(k, str) and _NAME.match(k) else "_schema"
                errors.setdefault(where, []).append(
                    f"unknown field {show(k)}; allowed here: {names}"
                )
            raise ValidationError(errors)


def _raise(errors: dict) -> None:
    if errors:
        raise ValidationError(errors)


def _put(errors: dict, path: tuple, message: str) -> None:
    node = errors
    for key in path[:-1]:
        child = node.setdefault(key, {})
        if isinstance(child, list):  # messages already on the object itself: keep them there
            child = node[key] = {"_schema": child}
        node = child
    leaf = node.setdefault(path[-1], [])
    if isinstance(leaf, dict):
        leaf = leaf.setdefault("_schema", [])
    leaf.append(message)


# ---------------------------------------------------------------------------------------------
# Simulation data models: one schema per distribution family

# Parameter name -> (interval, description). Order is the documented order.
FAMILY_PARAMS: dict[str, dict[str, tuple[Interval, str]]] = {
    "normal": {"mean": (REAL, "mean"), "sd": (POSITIVE, "standard deviation")},
    "lognormal": {
        "mu": (REAL, "mean of the log"),
        "sigma": (POSITIVE, "standard deviation of the log"),
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
                {"high": [f"must be > low ({_num(data['low'])}); got {show(data['high'])}"]}
            )


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
        return ARM_SCHEMAS[family]().load(value)


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


# ---------------------------------------------------------------------------------------------
# Nested blocks


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
    higher_is_better = Flag(default=True, description="true when larger outcomes are better")

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
    """Cluster sampling: design effect 1 + (mean_size - 1) * icc."""

    mean_size = Number(Interval(1, None), required=True, description="mean cluster size")
    icc = Number(UNIT_HALF_OPEN, required=True, description="intracluster correlation")


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
        return SimulationSchema(design=valid_design(data)).load(value)


# ---------------------------------------------------------------------------------------------
# Effect fields: one schema per design


def valid_design(data: Any) -> str | None:
    """The posted design when it is a known one, else None."""
    design = data.get("design") if isinstance(data, Mapping) else None
    return design if isinstance(design, str) and design in DESIGN_NAMES else None


def valid_find(data: Any) -> str:
    """The posted ``find`` when valid, else the default."""
    find = data.get("find") if isinstance(data, Mapping) else None
    return find if isinstance(find, str) and find in FINDS else "sample_size"


class EffectBase(Strict):
    """Common machinery: ``SOLVED`` is the field solved for when find = effect."""

    SOLVED: str = ""
    # The accepted ways to post the block, for the catalogue (the solved field drops out
    # when find = effect).
    FORMS: tuple = ()

    def __init__(self, *, find: str = "sample_size", **kwargs: Any):
        self.find = find
        super().__init__(**kwargs)

    def need(self, errors: dict, original: Any, *names: str) -> None:
        """Record 'is required' for each of ``names`` not posted."""
        for name in names:
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
        _raise(errors)

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
        out["sd_control"] = sd if sd is not None else data["sd_control"]
        out["sd_treatment"] = sd if sd is not None else data["sd_treatment"]
        return out


class OneMeanEffectSchema(EffectBase):
    """One mean against a null value."""

    FORMS = ("difference, sd",)
    SOLVED = "difference"
    difference = Number(description="expected mean minus the null value")
    sd = Number(POSITIVE, description="standard deviation of one observation")

    def rules(self, errors: dict, data: dict, original: Any) -> None:
        self.need(errors, original, "sd")


class PairedMeanEffectSchema(EffectBase):
    """Paired means: the mean of the differences and their SD (or SD + within-pair correlation)."""

    FORMS = ("difference, sd_difference", "difference, sd, correlation")
    SOLVED = "difference"
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
        else:
            out["sd_difference"] = data["sd"] * math.sqrt(2.0 * (1.0 - data["correlation"]))
        return out


class TwoProportionsEffectSchema(EffectBase):
    """Two independent proportions."""

    FORMS = ("p_control, p_treatment [, continuity_correction]",)
    SOLVED = "p_treatment"
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
        NONNEG, description="Cohen's f: SD of the group means (divisor k) / within SD"
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
        return EFFECT_SCHEMAS[design](find=valid_find(data)).load(value)


def arm_count(design: str, effect: Mapping | None) -> int | None:
    """Number of arms of a design (None when the ANOVA group count is not known)."""
    if design in TWO_ARM:
        return 2
    if design == "anova_oneway":
        groups = (effect or {}).get("groups")
        if groups is None and (effect or {}).get("group_means") is not None:
            groups = len(effect["group_means"])
        return groups
    return 1


def allocation_weights(design: str, ratio: float, arms: int) -> list[float]:
    """Relative arm sizes, control first: [1, ratio] for two-arm designs, equal otherwise."""
    return [1.0, ratio] if design in TWO_ARM else [1.0] * arms


# ---------------------------------------------------------------------------------------------
# The question


class QuestionSchema(Strict):
    """A sample-size, power or detectable-effect question; ``load`` returns the normalized form."""

    design = Choice(DESIGN_NAMES, required=True, description="the study design")
    find = Choice(FINDS, load_default="sample_size", description="what to solve for")
    alpha = Number(
        Interval(0, 0.5, low_open=True),
        default=0.05,
        description="type I error rate (before any Bonferroni split)",
    )
    sides = Whole(
        Interval(1, 2),
        description="1 or 2; default 2 for superiority, 1 for noninferiority/equivalence",
    )
    target_power = Number(
        Interval(0, 1, low_open=True, high_open=True),
        description="power to reach, in (alpha, 1); default 0.80 (common practice); "
        "not used when find = power",
    )
    sample_size = Obj(
        SampleSizeSchema,
        description="enrolled numbers for find = power or effect; absent for find = sample_size",
    )
    allocation_ratio = Number(
        Interval(0, 1000, low_open=True),
        description="treatment:control allocation, default 1 (two-arm designs only)",
    )
    effect = Effect(
        allow_none=True,
        load_default=None,
        metadata={"description": "design-specific effect fields (see GET /v1/designs)"},
    )
    hypothesis = Obj(
        HypothesisSchema, description="superiority (default), noninferiority or equivalence"
    )
    adjustments = Obj(AdjustmentsSchema, description="dropout, clustering and multiple comparisons")
    method = Choice(METHODS, description="analytic (default) or simulation")
    formula = Text(description="analytic formula; one of the design's formulas (default the first)")
    simulation = SimulationField(
        SimulationSchema, description="Monte Carlo settings for method = simulation"
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _cross_field(self, data: dict, original_data: Any, **kwargs: Any) -> None:
        if not isinstance(original_data, Mapping):
            return
        errors: dict = {}
        design = valid_design(original_data) if "design" in data else None
        find = data.get("find") if "find" in data else None
        raw = original_data

        # find and the sample size
        if find == "sample_size" and posted(raw, "sample_size"):
            _put(
                errors,
                ("sample_size",),
                "must be absent when find = sample_size (it is what is solved for); "
                f"got {show(raw['sample_size'])}",
            )
        if find in ("power", "effect") and not posted(raw, "sample_size"):
            _put(
                errors,
                ("sample_size",),
                f'is required when find = {find}: {{"per_arm": [n, ...]}} or {{"total": N}}',
            )
        if find == "power" and posted(raw, "target_power"):
            _put(
                errors,
                ("target_power",),
                f"is not used when find = power (power is what is solved for); "
                f"got {show(raw['target_power'])}",
            )
        alpha, target = data.get("alpha"), data.get("target_power")
        if alpha is not None and target is not None and not target > alpha:
            _put(
                errors,
                ("target_power",),
                f"must be in (alpha, 1) = ({_num(alpha)}, 1); got {show(target)}",
            )

        hyp = data.get("hypothesis") or {}
        kind = (
            hyp.get("kind", "superiority")
            if "hypothesis" in data or not posted(raw, "hypothesis")
            else None
        )
        if kind in ("noninferiority", "equivalence"):
            if data.get("sides") == 2:
                _put(errors, ("sides",), f"must be 1 for {kind} (one-sided by construction); got 2")
            if design is not None and design not in MARGIN_DESIGNS:
                _put(
                    errors,
                    ("hypothesis", "kind"),
                    f"{kind} is offered only for {', '.join(MARGIN_DESIGNS)}; "
                    f"got {show(kind)} with design {show(design)}",
                )
            margin = hyp.get("margin")
            if design == "two_proportions" and margin is not None and not abs(margin) < 1:
                _put(
                    errors,
                    ("hypothesis", "margin"),
                    f"must be in (-1, 1) for two_proportions (a difference of proportions); "
                    f"got {show(margin)}",
                )

        if design is None:
            _raise(errors)
            return

        # 1 is accepted everywhere so a normalized question loads again unchanged.
        if (
            posted(raw, "allocation_ratio")
            and design not in TWO_ARM
            and raw["allocation_ratio"] != 1
        ):
            _put(
                errors,
                ("allocation_ratio",),
                f"applies only to two-arm designs ({', '.join(TWO_ARM)}); "
                f"got {show(raw['allocation_ratio'])} for design {show(design)}",
            )

        formula = data.get("formula")
        if formula is not None and formula not in FORMULAS[design]:
            _put(
                errors,
                ("formula",),
                f"must be one of {', '.join(FORMULAS[design])} for {design}; {got(formula)}",
            )

        # the effect block (absent: report its required fields)
        effect = data.get("effect")
        if not posted(raw, "effect"):
            schema = EFFECT_SCHEMAS[design](find=find or "sample_size")
            missing = schema.validate({})
            for name, messages in missing.items():
                for message in messages:
                    _put(errors, ("effect", name), message)
            effect = None if missing else schema.load({})

        # method and simulation
        sim = data.get("simulation")
        sim_posted = posted(raw, "simulation")
        sim_data = (sim or {}).get("data")
        method = (data.get("method") or "invalid") if posted(raw, "method") else None
        prob = (effect or {}).get("prob_superiority")
        if method is None:
            only_model = design == "rank_sum" and prob is None and sim_data is not None
            method = "simulation" if only_model else "analytic"
        if method == "analytic" and sim_posted:
            _put(
                errors,
                ("simulation",),
                'is given but method is analytic; set method to "simulation" or remove it',
            )
        if find == "effect" and method == "simulation":
            _put(
                errors,
                ("method",),
                "simulation is not offered for find = effect (the effect is solved analytically); "
                'use method = "analytic"',
            )
        if design == "rank_sum" and find != "effect" and effect is not None and prob is None:
            if sim_data is None:
                _put(
                    errors,
                    ("effect", "prob_superiority"),
                    "is required: a number in (0, 1), unless simulation.data gives a data model; "
                    "got neither",
                )
            elif method == "analytic" and posted(raw, "method"):
                _put(
                    errors,
                    ("effect", "prob_superiority"),
                    "is required for method = analytic (the Noether formula needs it): "
                    "a number in (0, 1)",
                )

        if effect is not None and "effect" not in errors:
            self._effect_rules(errors, design, find, hyp if kind else {}, effect)

        # arms: sample size shape, ANOVA data model size
        arms = arm_count(design, effect) if effect is not None else None
        size = data.get("sample_size")
        if arms is not None and size is not None and size.get("per_arm") is not None:
            if len(size["per_arm"]) != arms:
                _put(
                    errors,
                    ("sample_size", "per_arm"),
                    f"must list {arms} number(s), one per arm (control first); "
                    f"got {len(size['per_arm'])}: {show(size['per_arm'])}",
                )
        if arms is not None and size is not None and size.get("total") is not None:
            ratio = data.get("allocation_ratio") or 1.0
            split = split_total(size["total"], allocation_weights(design, ratio, arms))
            if min(split) < 2:
                _put(
                    errors,
                    ("sample_size", "total"),
                    f"splits into {split} by the allocation; every arm needs at least 2; "
                    f"got {size['total']}",
                )
        if design == "anova_oneway" and arms is not None and sim_data and "groups" in sim_data:
            if len(sim_data["groups"]) != arms:
                _put(
                    errors,
                    ("simulation", "data", "groups"),
                    f"must list {arms} arms, one per group (effect.groups); "
                    f"got {len(sim_data['groups'])}",
                )
        _raise(errors)

    @staticmethod
    def _effect_rules(
        errors: dict, design: str, find: str | None, hyp: Mapping, e: Mapping
    ) -> None:
        """Rules that tie the effect to find and the hypothesis."""
        if find != "sample_size":
            return
        kind = hyp.get("kind", "superiority")
        margin = hyp.get("margin")
        if kind == "superiority":
            zero = {
                "two_means": ("difference", 0.0, "0"),
                "one_mean": ("difference", 0.0, "0"),
                "paired_mean": ("difference", 0.0, "0"),
                "two_proportions": ("p_treatment", e.get("p_control"), "p_control"),
                "correlation": ("r", e.get("r0", 0.0), "r0"),
                "rank_sum": ("prob_superiority", 0.5, "0.5"),
                "survival_logrank": ("hazard_ratio", 1.0, "1"),
                "anova_oneway": ("cohens_f", 0.0, "0"),
            }[design]
            name, null, label = zero
            value = e.get(name)
            if value is not None and null is not None and value == null:
                _put(
                    errors,
                    ("effect", name),
                    f"must differ from {label} when solving for the sample size "
                    f"(no effect to detect); got {show(value)}",
                )
            return
        if margin is None or design not in MARGIN_DESIGNS:
            return
        if design == "two_means":
            name, diff = "difference", e.get("difference")
        else:
            name, diff = "p_treatment", e["p_treatment"] - e["p_control"]
        if diff is None:
            return
        shown = "difference" if design == "two_means" else "p_treatment - p_control"
        if kind == "noninferiority":
            better = hyp.get("higher_is_better", True)
            ok = diff > margin if better else diff < margin
            if not ok:
                side = "above" if better else "below"
                _put(
                    errors,
                    ("effect", name),
                    f"{shown} must be {side} the noninferiority margin {_num(margin)} when "
                    f"solving for the sample size; got {show(diff)}",
                )
        elif kind == "equivalence" and not abs(diff) < margin:
            _put(
                errors,
                ("effect", name),
                f"{shown} must be inside (-{_num(margin)}, {_num(margin)}) when solving for "
                f"the sample size of an equivalence question; got {show(diff)}",
            )

    @post_load
    def _normalize(self, data: dict, **kwargs: Any) -> dict:
        design, find = data["design"], data["find"]
        hyp = data.get("hypothesis") or HypothesisSchema().load({})
        kind = hyp["kind"]
        effect = data.get("effect")
        if effect is None:
            effect = EFFECT_SCHEMAS[design](find=find).load({})
        sim = data.get("simulation")
        method = data.get("method")
        if method is None:
            only_model = (
                design == "rank_sum"
                and effect.get("prob_superiority") is None
                and sim is not None
                and sim.get("data") is not None
            )
            method = "simulation" if only_model else "analytic"
        if method == "simulation":
            sim = sim if sim is not None else SimulationSchema(design=design).load({})
            if sim.get("test") is None:
                sim["test"] = TESTS[design][0]
        else:
            sim = None
        formula = data.get("formula")
        if formula is None:
            formula = FORMULAS[design][0]
            if design == "two_means" and effect["sd_control"] != effect["sd_treatment"]:
                formula = "welch"
        ratio = data.get("allocation_ratio")
        ratio = 1.0 if ratio is None else ratio
        sample_size = data.get("sample_size")
        if sample_size is not None:
            arms = arm_count(design, effect)
            if sample_size.get("per_arm") is not None:
                sample_size = {"per_arm": list(sample_size["per_arm"])}
            else:
                weights = allocation_weights(design, ratio, arms)
                sample_size = {"per_arm": split_total(sample_size["total"], weights)}
        sides = data.get("sides")
        if sides is None:
            sides = 2 if kind == "superiority" else 1
        adjustments = data.get("adjustments") or AdjustmentsSchema().load({})
        return {
            "design": design,
            "find": find,
            "alpha": data["alpha"],
            "sides": sides,
            "target_power": None
            if find == "power"
            else (0.80 if data.get("target_power") is None else data["target_power"]),
            "sample_size": sample_size if find != "sample_size" else None,
            "allocation_ratio": ratio,
            "effect": effect,
            "hypothesis": hyp,
            "adjustments": adjustments,
            "method": method,
            "formula": formula,
            "simulation": sim,
        }


# ---------------------------------------------------------------------------------------------
# Entry points


def flatten_errors(messages: Any, prefix: str = "") -> dict[str, list[str]]:
    """Turn marshmallow's nested error messages into ``{"dotted.path": [messages]}``."""
    out: dict[str, list[str]] = {}

    def walk(node: Any, path: str) -> None:
        if isinstance(node, Mapping):
            for key, sub in node.items():
                key = str(key)
                if key == "_schema":
                    walk(sub, path)
                else:
                    walk(sub, f"{path}.{key}" if path else key)
        elif isinstance(node, (list, tuple)):
            for item in node:
                if isinstance(item, (Mapping, list, tuple)):
                    walk(item, path)
                else:
                    out.setdefault(path or "question", []).append(str(item))
        else:
            out.setdefault(path or "question", []).append(str(node))

    walk(messages, prefix)
    return out


def load_question(raw: Any) -> dict:
    """Validate and normalize a posted question; raise ``QuestionInvalid`` on bad input."""
    if not isinstance(raw, Mapping):
        raise QuestionInvalid(
            {"question": [f"must be a JSON object with at least a design; {got(raw)}"]}
        )
    try:
        return QuestionSchema().load(dict(raw))
    except ValidationError as exc:
        raise QuestionInvalid(flatten_errors(exc.messages)) from None


def register_openapi_types(plugin: Any) -> None:
    """Tell apispec's MarshmallowPlugin how the strict fields map to OpenAPI types."""
    plugin.map_to_openapi_type(Whole, "integer", None)
    plugin.map_to_openapi_type(Number, "number", None)
    plugin.map_to_openapi_type(Flag, "boolean", None)
    plugin.map_to_openapi_type(Choice, "string", None)
    plugin.map_to_openapi_type(Text, "string", None)
