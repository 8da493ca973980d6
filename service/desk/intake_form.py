"""The intake page's form, generated from the catalogue, and the question built from a posted form.

Nothing here is written per cell: a cell's inputs are its design's declared fields as the
catalogue describes them (``service.schemas.catalogue``: label, help, unit, range, default,
choices, when needed); the common question inputs and their help come from the question
schema's own fields. Input names are dotted body paths (``question.assumptions.sd``,
``requester.department``), so the schema's error paths land beside their inputs.

Parsing is deliberately thin: empty inputs are left out and numbers are read as numbers; text
that is not a number is passed on as posted so the one validation layer (the request schema)
refuses it with its own message.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

from service.schemas.blocks import (
    AdjustmentsSchema,
    HypothesisSchema,
    SampleSizeSchema,
    SimulationSchema,
)
from service.schemas.catalogue import describe_cell, describe_schema
from service.schemas.question import QuestionSchema

Q = "question."


@dataclass(frozen=True)
class Input:
    """One input of the intake form."""

    name: str  # dotted body path, also the HTML name and the key of its error messages
    label: str
    kind: str  # number | integer | boolean | choice | number_list | integer_list | text | ...
    help: str = ""
    unit: str | None = None
    allowed: str = ""
    needed: str = ""
    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: bool = False
    exclusive_maximum: bool = False
    choices: tuple[tuple[str, str], ...] = ()  # (value, label)
    default: Any = None
    required: bool = False  # the browser asks for it too (the schema decides anyway)

    @property
    def id(self) -> str:
        return "f-" + self.name.replace(".", "-")

    def attributes(self) -> dict[str, str]:
        """HTML attributes for the declared range (inclusive ends; exclusive ones as data-*)."""
        attrs: dict[str, str] = {}
        if self.kind in ("number", "integer"):
            attrs["step"] = "1" if self.kind == "integer" else "any"
            for end, value, exclusive in (
                ("min", self.minimum, self.exclusive_minimum),
                ("max", self.maximum, self.exclusive_maximum),
            ):
                if value is not None:
                    # HTML min/max are inclusive: an open end is stated but not enforced here.
                    attrs[f"data-exclusive-{end}" if exclusive else end] = f"{value:g}"
        return attrs


@dataclass(frozen=True)
class Section:
    """A group of inputs shown under one heading."""

    title: str
    inputs: tuple[Input, ...]
    note: str = ""
    forms: tuple[str, ...] = field(default=())  # the accepted field sets, in words


def _described(schema, prefix: str, names: dict[str, str]) -> list[Input]:
    # The schema's own description, range and choices of each named common field.
    entries = {e["name"]: e for e in describe_schema(schema)}
    out = []
    for name, label in names.items():
        e = entries[name]
        kind = {"number": "number", "integer": "integer", "boolean": "boolean"}.get(e["type"])
        if "enum" in e:
            kind = "choice"
        if e["type"] == "array":
            kind = "integer_list" if e.get("items", {}).get("type") == "integer" else "number_list"
        out.append(
            Input(
                name=prefix + name,
                label=label,
                kind=kind or "text",
                help=_sentence(e.get("description", "")),
                allowed=e.get("allowed", ""),
                minimum=e.get("minimum", e.get("exclusiveMinimum")),
                maximum=e.get("maximum", e.get("exclusiveMaximum")),
                exclusive_minimum="exclusiveMinimum" in e,
                exclusive_maximum="exclusiveMaximum" in e,
                choices=tuple((c, c.replace("_", " ")) for c in e.get("enum", ())),
                default=e.get("default"),
            )
        )
    return out


def _sentence(text: str) -> str:
    """The schema's help as a sentence: capital first letter, final period."""
    text = text.strip()
    if not text:
        return ""
    return text[0].upper() + text[1:] + ("" if text.endswith((".", ")")) else ".")


def _in_words(text: str, labels: dict[str, str]) -> str:
    # The catalogue's "needed" text names fields; the page names them by their labels.
    names = "|".join(re.escape(n) for n in sorted(labels, key=len, reverse=True))
    text = re.sub(rf"\b({names})\b", lambda m: labels[m.group(1)], text) if names else text
    return text[:1].upper() + text[1:]


def _cell_inputs(entry: dict) -> list[Input]:
    labels = {f["name"]: f["label"] for f in entry["fields"]}
    return [
        Input(
            name=Q + f["path"],
            label=f["label"][:1].upper() + f["label"][1:],
            kind="choice" if f["type"] == "choice" else f["type"],
            help=f["help"],
            unit=f["unit"],
            allowed=f["allowed"],
            needed=_in_words(f["needed"], labels),
            minimum=f.get("minimum"),
            maximum=f.get("maximum"),
            exclusive_minimum=f.get("exclusive_minimum", False),
            exclusive_maximum=f.get("exclusive_maximum", False),
            choices=tuple((c, c.replace("_", " ")) for c in f.get("choices", ())),
            default=f.get("default"),
        )
        for f in entry["fields"]
    ]


_BLOCK_TITLES = {
    "effect": "The effect to detect",
    "assumptions": "What the study assumes",
    "analysis_options": "Options of the analysis",
}


def _forms_in_words(design: Any) -> tuple[str, ...]:
    labels = {f.name: f.label for f in design.fields}
    forms = [f for f in design.forms if f]
    if len(forms) < 2:
        return ()
    return tuple(" + ".join(labels.get(n, n) for n in form) for form in forms)


def sections(design: Any) -> list[Section]:
    """The intake form of one cell: request, the cell's blocks, then the common question."""
    entry = describe_cell(design)
    cell_inputs = _cell_inputs(entry)
    blocks = [
        Section(
            _BLOCK_TITLES.get(block, block),
            tuple(i for i in cell_inputs if i.name.startswith(f"{Q}{block}.")),
        )
        for block in _BLOCK_TITLES
    ]
    blocks = [b for b in blocks if b.inputs]
    forms = _forms_in_words(design)
    if forms and blocks:
        # The alternatives are stated once, above the cell's fields.
        blocks[0] = Section(blocks[0].title, blocks[0].inputs, forms=forms)
    analysis = Input(
        name=Q + "analysis",
        label="Planned analysis",
        kind="choice",
        help="The test the study will use; left empty, the cell's default is taken.",
        choices=tuple((a["name"], a["label"]) for a in entry["analyses"]),
    )
    question = _described(
        QuestionSchema,
        Q,
        {
            "find": "Find",
            "alpha": "Alpha",
            "alternative": "Alternative",
            "target_power": "Target power",
        },
    )
    hypothesis = _described(
        HypothesisSchema,
        Q + "hypothesis.",
        {
            "aim": "Aim",
            "margin": "Margin",
            "higher_is_better": "Higher is better",
            "half_width": "Half-width (estimation)",
            "confidence": "Confidence (estimation)",
            "assurance": "Assurance (estimation)",
        },
    )
    allocation = _described(
        QuestionSchema,
        Q,
        {"allocation_ratio": "Allocation ratio", "allocation_rounding": "Allocation rounding"},
    )
    size = _described(
        SampleSizeSchema,
        Q + "sample_size.",
        {"per_group": "Enrolled per group", "total": "Enrolled in total"},
    )
    adjustments = _described(
        AdjustmentsSchema, Q + "adjustments.", {"dropout": "Dropout", "comparisons": "Comparisons"}
    )
    method = _described(QuestionSchema, Q, {"method": "Method"})
    simulation = _described(
        SimulationSchema,
        Q + "simulation.",
        {"replicates": "Replicates", "seed": "Seed", "decision_rule": "Decision rule"},
    )
    return [
        *request_sections(),
        Section("The question", (analysis, *question)),
        *blocks,
        Section("Hypothesis", tuple(hypothesis)),
        Section(
            "Allocation and sample size",
            (*allocation, *size),
            note="Enrolled numbers only when finding power or the effect "
            "(per group: whole numbers separated by commas, control first).",
        ),
        Section("Adjustments", tuple(adjustments)),
        Section(
            "Method",
            (*method, *simulation),
            note="The simulation settings apply only when the method is simulation.",
        ),
    ]


def request_sections() -> list[Section]:
    """Who asks, for which protocol, by when (the request's own fields)."""
    text = "text"
    return [
        Section(
            "Protocol",
            (
                Input(
                    "protocol.id",
                    "Protocol ID",
                    text,
                    help="The protocol's identifier in the institution's register.",
                    allowed="1-64 letters, digits or . _ / -",
                    required=True,
                ),
                Input("protocol.title", "Title", text, required=True),
                Input("protocol.principal_investigator", "Principal investigator", text),
            ),
        ),
        Section(
            "Requester",
            (
                Input("requester.name", "Name", text, required=True),
                Input("requester.email", "E-mail", "email", required=True),
                Input("requester.department", "Department", text, required=True),
                Input("deadline", "Needed by", "date", help="When the answer is needed (a date)."),
                Input(
                    "effect_source",
                    "Where the effect and assumptions come from",
                    text,
                    help="Quoted in the justification, e.g. 'SD from the 2024 audit of clinic "
                    "visits'.",
                ),
                Input("notes", "Notes", "textarea"),
            ),
        ),
    ]


def inputs(design: Any) -> list[Input]:
    """Every input of a cell's form, in page order."""
    return [i for s in sections(design) for i in s.inputs]


# --- the posted form -> the request body -----------------------------------------------------


def _number(text: str, integer: bool) -> Any:
    # As a JSON client would post it: "12" an integer, "12.5" a float (messages echo it so).
    for parse in (int, float):
        try:
            value = parse(text)
        except ValueError:
            continue
        if integer and isinstance(value, float) and value.is_integer():
            return int(value)
        return value
    return text  # not a number: the schema refuses it, naming the field


def _value(spec: Input, text: str) -> Any:
    if spec.kind in ("number", "integer"):
        return _number(text, spec.kind == "integer")
    if spec.kind in ("number_list", "integer_list"):
        parts = [p.strip() for p in text.replace(";", ",").split(",") if p.strip()]
        return [_number(p, spec.kind == "integer_list") for p in parts]
    if spec.kind == "boolean":
        return {"true": True, "false": False}.get(text, text)
    return text


def body_from_form(design: Any, form: Any) -> dict:
    """The POST /v1/requests body a submitted intake form stands for (empty inputs left out)."""
    body: dict = {"question": {"outcome": design.outcome, "layout": design.layout}}
    for spec in inputs(design):
        text = (form.get(spec.name) or "").strip()
        if not text:
            continue
        node = body
        *parents, leaf = spec.name.split(".")
        for key in parents:
            node = node.setdefault(key, {})
        node[leaf] = _value(spec, text)
    return body


def errors_by_input(design: Any, errors: dict[str, list[str]]) -> tuple[dict, list[str]]:
    """Split field-keyed errors into those beside an input and the rest (shown on top)."""
    names = [spec.name for spec in inputs(design)]  # page order
    beside: dict[str, list[str]] = {}
    rest: list[str] = []
    for path, messages in errors.items():
        target = _nearest_input(path, names)
        if target is None:
            rest += [f"{path}: {m}" for m in messages]
        else:
            beside.setdefault(target, []).extend(messages)
    return beside, rest


def _nearest_input(path: str, names: list[str]) -> str | None:
    # "question.sample_size.per_group.1" sits beside "question.sample_size.per_group"; a message
    # on a whole block ("question.sample_size") beside the block's first input.
    parts = path.split(".")
    while parts:
        candidate = ".".join(parts)
        if candidate in names:
            return candidate
        inside = [n for n in names if n.startswith(candidate + ".")]
        if inside and candidate != "question":
            return inside[0]
        parts.pop()
    return None
