"""The cell's own blocks (``effect``, ``assumptions``, ``analysis_options``), for any design.

One generic pass per question, driven by the design's declarations:

1. each block is loaded through the schema generated from its fields (types, ranges, choices,
   unknown keys — a key declared in another block of the cell is pointed there);
2. the design's pure ``validate`` then decides requiredness from its ``forms`` (``sd``, or
   ``sd_control`` + ``sd_treatment``), ``find`` (which solves the ``solved`` field) and a posted
   data model (which implies some fields), and applies the cell's cross-field rules; its
   "is required" messages gain what the field allows.

The normalized blocks keep what was posted and add the declared defaults.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from marshmallow import ValidationError

from service.engine.designs.common import aim_of, validate_question_blocks

from . import declared
from .errors import flatten_errors
from .fields import got, show
from .vocabulary import BLOCKS


class Cell:
    """Checks the cell blocks of one posted question; ``errors`` is keyed by dotted path."""

    def __init__(self, design: Any, raw: Mapping, find: str, from_data: bool):
        self.design, self.raw, self.find, self.from_data = design, raw, find, from_data
        self.fields = {f.name: f for f in design.fields}
        self.errors: dict[str, list[str]] = {}
        self.loaded: dict[str, dict] = {}

    def add(self, name: str, message: str) -> None:
        """Record an error on a declared field (or on a dotted path)."""
        where = f"{self.fields[name].block}.{name}" if name in self.fields else name
        messages = self.errors.setdefault(where, [])
        if message not in messages:
            messages.append(message)

    # -- 1. types and ranges ---------------------------------------------------------------

    def load_blocks(self) -> None:
        """Load each posted block through its generated schema."""
        for block in BLOCKS:
            value = self.raw.get(block)
            if value is None:
                self.loaded[block] = {}
                continue
            names = [f.name for f in declared.block_fields(self.design, block)]
            if not isinstance(value, Mapping):
                shape = (
                    f"must be an object with keys {', '.join(names)}"
                    if names
                    else f"takes no keys for {self.design.cell}: remove it"
                )
                self.add(block, f"{shape}; {got(value)}")
                self.loaded[block] = {}
                continue
            try:
                data = declared.block_schema(self.design, block).load(dict(value))
                self.loaded[block] = {k: v for k, v in data.items() if v is not None}
            except ValidationError as exc:
                self.loaded[block] = {
                    k: v
                    for k, v in (exc.valid_data or {}).items()
                    if v is not None and k not in exc.messages
                }
                for where, messages in flatten_errors(exc.messages, prefix=block).items():
                    key = where[len(block) + 1 :]  # empty for the block's own messages
                    for message in messages:
                        self.add(where, self._misplaced(block, key, message))

    def _misplaced(self, block: str, key: str, message: str) -> str:
        # A field of this cell posted in the wrong block: say where it belongs.
        other = self.fields.get(key)
        if other is not None and other.block != block and message.startswith("unknown field"):
            return f"{message}; {key} belongs in {other.block}"
        return message

    # -- 2. the design's own rules and the normalized blocks ---------------------------------

    def check(self) -> None:
        """Types and ranges, then the design's ``validate`` on the values that passed them
        (a field that failed its own check is reported there only)."""
        self.load_blocks()
        failed = set(self.errors)
        found = validate_question_blocks(
            self.design, self.loaded, self.find, self.from_data, aim_of(self.raw)
        )
        for where, messages in found.items():
            if where in failed:
                continue
            for message in messages:
                self.add(where, self._allowed_named(where, message))

    def _allowed_named(self, where: str, message: str) -> str:
        # Messages say what is allowed and echo what was posted: "is required: a number > 0
        # (or give control_hazard)", "is solved for when find = effect; remove it; got 0.5".
        name = where.rsplit(".", 1)[-1]
        if name not in self.fields:
            return message
        if message.startswith("is required"):
            rest = message[len("is required") :] or self._alternative(name)
            return f"is required: {declared.allowed(self.fields[name])}{rest}"
        value = self._value(name)
        if value is not None and "got" not in message:
            return f"{message}; got {show(value)}"
        return message

    def _alternative(self, name: str) -> str:
        """' (or give x)': the fields of the other forms that stand in for ``name``."""
        forms = [
            form
            for form in self.design.forms
            # find = effect takes no effect field: forms holding one are no alternative then
            if self.find != "effect" or all(self.fields[n].block != "effect" for n in form)
        ]
        mine = {n for form in forms if name in form for n in form}
        others = [n for form in forms if name not in form for n in form]
        instead = [n for n in dict.fromkeys(others) if n not in mine]
        return f" (or give {' + '.join(instead)})" if mine and instead else ""

    def _value(self, name: str) -> Any:
        block = self.raw.get(self.fields[name].block)
        return block.get(name) if isinstance(block, Mapping) else None

    def blocks(self) -> dict[str, dict]:
        """The normalized blocks: what was posted, plus the declared defaults."""
        out = {block: dict(self.loaded.get(block) or {}) for block in BLOCKS}
        for name, f in self.fields.items():
            if f.default is not None and name not in out[f.block]:
                out[f.block][name] = f.default
        return out
