"""Strict marshmallow fields, numeric intervals and the base schema every question block uses.

Numbers are strict: JSON numbers only (no strings, no booleans, no NaN or infinity). Every
message names what is allowed and echoes the posted value (``show``, ``got``, ``kind_of``).
Ranges are ``Interval`` objects whose ``metadata()`` gives the JSON Schema 2020-12 keywords, so
the OpenAPI document and the design catalogue show the limits the validator enforces.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from marshmallow import EXCLUDE, Schema, ValidationError, fields, pre_load, validates_schema

# C0 controls but tab, newline and carriage return; DEL and the C1 controls: refused in every
# string the API reads (body values and keys, query values, path ids; NUL cannot be stored in
# PostgreSQL text). The class reads the same in Python's re and in ECMA-262, so the OpenAPI
# document and the JSON Schema say it as the ``pattern`` of every free-text string.
CONTROL_CLASS = r"\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f"
CONTROL = re.compile(f"[{CONTROL_CLASS}]")
TEXT_PATTERN = f"^[^{CONTROL_CLASS}]*$"

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


def number_text(x: float) -> str:
    """Render a bound or a limit for messages: integers without '.0', large ones with commas."""
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
            return f"in {lo}{number_text(self.low)}, {number_text(self.high)}{hi}"
        if self.low is not None:
            return f"{'>' if self.low_open else '>='} {number_text(self.low)}"
        if self.high is not None:
            return f"{'<' if self.high_open else '<='} {number_text(self.high)}"
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


# Magnitudes outside this band are named as the likely cause when the numerics fail.
_LARGE, _SMALL = 1e100, 1e-100


def extreme_fields(value: Any, path: str = "question") -> list[str]:
    """Dotted paths of the numbers in ``value`` far outside double precision's working range."""
    if isinstance(value, bool):
        return []
    if isinstance(value, (int, float)):
        x = abs(float(value)) if math.isfinite(float(value)) else math.inf
        return [path] if x > _LARGE or 0 < x < _SMALL else []
    if isinstance(value, Mapping):
        return [p for k, v in value.items() for p in extreme_fields(v, f"{path}.{k}")]
    if isinstance(value, list):
        return [p for i, v in enumerate(value) for p in extreme_fields(v, f"{path}.{i}")]
    return []


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

    def __init__(self, *, description: str, default: bool | None, **kwargs: Any):
        meta: dict = {"description": description}
        if default is not None:
            meta["default"] = default
        super().__init__(
            metadata=meta,
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
                # Each unknown key at its own path, plain name or not (effect.a b), so a form
                # shows the error beside it; only marshmallow's own marker stays on the object.
                where = str(k)
                errors.setdefault(where, []).append(
                    f"unknown field {show(k)}; allowed here: {names}"
                )
            raise ValidationError(errors)


def raise_errors(errors: dict) -> None:
    """Raise the collected field errors as one ``ValidationError``, if there are any."""
    if errors:
        raise ValidationError(errors)


def put_error(errors: dict, path: tuple, message: str) -> None:
    """Add ``message`` at the nested ``path`` of a marshmallow error dict."""
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
