"""The cell's own blocks (``effect``, ``assumptions``, ``analysis_options``), for any design.

One generic pass per question, driven by the design's declarations:

1. each block is loaded through the schema generated from its fields (types, ranges, choices,
   unknown keys — a key declared in another block of the cell is pointed there);
2. requiredness: a field with a default is optional; the design's ``forms`` are the accepted
   alternative sets (``sd`` or ``sd_control`` + ``sd_treatment``) and the posted fields must
   match one of them; a declared field in no form is always required; the ``solved`` field is
   required, except that find = effect solves it (it must then be absent) and a posted
   simulation data model may imply it (as it may imply the fields the design says it implies);
3. when all of that holds, the design's pure ``validate`` gives the cross-field rules.

The normalized blocks keep what was posted and add the declared defaults.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from marshmallow import ValidationError

from . import declared
from .fields import got, show
from .vocabulary import BLOCKS


def implied_fields(design: Any) -> frozenset[str]:
    """Fields a posted simulation data model states for this design (engine/implied.py)."""
    sim = getattr(design, "simulation", None)
    return frozenset(getattr(sim, "implied", ()) or ())


def field_map(design: Any) -> dict[str, Any]:
    """name -> declaration, for every declared field of the design."""
    return {f.name: f for f in design.fields}


def path(design: Any, name: str) -> str:
    """The dotted question path of a declared field: 'assumptions.sd'."""
    return f"{field_map(design)[name].block}.{name}"


class Cell:
    """Checks the cell blocks of one posted question; ``errors`` is keyed by dotted path."""

    def __init__(self, design: Any, raw: Mapping, find: str, from_data: bool):
        self.design, self.raw, self.find, self.from_data = design, raw, find, from_data
        self.fields = field_map(design)
        self.errors: dict[str, list[str]] = {}
        self.loaded: dict[str, dict] = {}

    def add(self, name: str, message: str) -> None:
        """Record an error on a declared field (or on a dotted path)."""
        where = path(self.design, name) if name in self.fields else name
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
                keys = ", ".join(names) if names else "none for this cell"
                self.add(block, f"must be an object with keys {keys}; {got(value)}")
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
                for key, messages in _flat(exc.messages).items():
                    for message in messages:
                        self.add(f"{block}.{key}", self._misplaced(block, key, message))

    def _misplaced(self, block: str, key: str, message: str) -> str:
        # A field of this cell posted in the wrong block: say where it belongs.
        other = self.fields.get(key)
        if other is not None and other.block != block and message.startswith("unknown field"):
            return f"{message}; {key} belongs in {other.block}"
        return message

    def posted(self) -> set[str]:
        """Names of the declared fields posted with a non-null value (valid or not)."""
        out = set()
        for block in BLOCKS:
            value = self.raw.get(block)
            if isinstance(value, Mapping):
                out |= {
                    k
                    for k, v in value.items()
                    if v is not None and k in self.fields and self.fields[k].block == block
                }
        return out

    # -- 2. requiredness --------------------------------------------------------------------

    def check_forms(self) -> None:
        """Required, forbidden and alternative fields, by the design's forms."""
        solved = self.design.solved
        posted = self.posted()
        forms = [frozenset(f) for f in self.design.forms]
        in_forms = frozenset().union(*forms) if forms else frozenset()
        optional = {n for n, f in self.fields.items() if f.default is not None}
        spared = implied_fields(self.design) | {solved} if self.from_data else set()
        if self.find == "effect":
            self._solved_is_absent(posted)
            with_solved = [f for f in forms if solved in f]
            if with_solved:
                # The other forms would fix the effect (group means): not offered here.
                kept = [f - {solved} for f in with_solved]
                for name in sorted((in_forms - frozenset().union(*kept)) & posted - {solved}):
                    self.add(
                        name,
                        f"cannot be given when find = effect ({solved} is solved for; give "
                        f"{_forms_text(kept)}); got {show(self._value(name))}",
                    )
                forms = kept
            else:
                forms = [f - {solved} for f in forms]
            in_forms = frozenset().union(*forms) if forms else frozenset()
        elif solved not in in_forms and solved not in posted and solved not in spared:
            self.add(solved, declared.required_message(self.fields[solved]))
        always = set(self.fields) - in_forms - optional - {solved}
        for name in sorted(always - posted - spared):
            self.add(name, declared.required_message(self.fields[name]))
        if forms:
            self._one_form(forms, posted & in_forms, spared)

    def _solved_is_absent(self, posted: set[str]) -> None:
        solved = self.design.solved
        if solved in posted:
            self.add(
                solved,
                f"is solved for when find = effect; remove it; got {show(self._value(solved))}",
            )

    def _one_form(self, forms: list[frozenset], given: set[str], spared: set[str]) -> None:
        if any(given == f for f in forms) or (self.from_data and not given):
            return

        def score(item: tuple[int, frozenset]) -> tuple[int, int]:
            index, form = item
            return (len(form & given) - len(given - form), -index)

        best = max(enumerate(forms), key=score)[1]
        others = [f for f in forms if f != best]
        extra = sorted(given - best)
        for name in sorted(best - given - spared):
            hint = f" (or give {_forms_text(others)})" if others and not extra else ""
            self.add(name, declared.required_message(self.fields[name]) + hint)
        for name in extra:
            self.add(
                name,
                f"give {_forms_text(forms)}, not several of these; got {show(self._value(name))}",
            )

    def _value(self, name: str) -> Any:
        return (self.raw.get(self.fields[name].block) or {}).get(name)

    # -- 3. the design's own rules and the normalized blocks ---------------------------------

    def check(self) -> None:
        """Run every check; the design's ``validate`` only once the fields themselves hold."""
        self.load_blocks()
        self.check_forms()
        if self.errors:
            return
        for where, messages in (
            self.design.validate(self.blocks(), self.find, self.from_data) or {}
        ).items():
            for message in messages:
                self.add(where, message)

    def blocks(self) -> dict[str, dict]:
        """The normalized blocks: what was posted, plus the declared defaults."""
        out = {block: dict(self.loaded.get(block) or {}) for block in BLOCKS}
        for name, f in self.fields.items():
            if f.default is not None and name not in out[f.block]:
                out[f.block][name] = f.default
        return out


def _forms_text(forms: list[frozenset]) -> str:
    texts = [" + ".join(sorted(f)) for f in forms if f]
    return ", or ".join(texts) if texts else "nothing"


def _flat(messages: Any, prefix: str = "") -> dict[str, list[str]]:
    from .question import flatten_errors

    return flatten_errors(messages, prefix)
