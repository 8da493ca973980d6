"""The JSON Schema (draft 2020-12) of a posted question, generated from the same declarations.

Served at ``GET /v1/catalogue/question.schema.json`` for form builders, and used as the
OpenAPI document's ``Question`` component (OpenAPI 3.1 schemas are JSON Schema 2020-12). The
common fields come from ``QuestionSchema``'s strict fields (types, ranges, enums, descriptions);
each registered cell adds one ``if``/``then`` branch giving its analyses, the fields of its
``effect``, ``assumptions`` and ``analysis_options`` blocks and the shape of its data model.
The schema refuses wrong types, ranges, unknown keys and analyses outside the cell, and requires what a
complete question gives by aim and find (``requirements``: the forms, the solved field, the
sample size, the margin's sign); what compares values (a target power above alpha, an effect in
the hypothesis's direction) or needs the engine is checked by the API, whose 422 names the field.
"""

from __future__ import annotations

from typing import Any

from marshmallow import Schema
from marshmallow import fields as mfields

from . import declared
from .data_models import FAMILY_PARAMS, data_keys, families_for
from .fields import TEXT_PATTERN, Choice, Flag, Number, NumberList, Obj, Text, Whole
from .vocabulary import BLOCKS, cells, layouts, outcomes

DIALECT = "https://json-schema.org/draft/2020-12/schema"
SCHEMA_PATH = "/v1/catalogue/question.schema.json"


def _nullable(schema: dict) -> dict:
    out = dict(schema)
    kind = out.get("type")
    if isinstance(kind, str):
        out["type"] = [kind, "null"]
    if "enum" in out and None not in out["enum"]:
        out["enum"] = [*out["enum"], None]
    return out


def field_schema(field: mfields.Field) -> dict:
    """One strict marshmallow field as JSON Schema (null allowed unless required)."""
    meta = {k: v for k, v in field.metadata.items() if k != "enum"}
    if isinstance(field, Whole):
        out: dict = {"type": "integer", **meta}
    elif isinstance(field, Number):
        out = {"type": "number", **meta}
    elif isinstance(field, Flag):
        out = {"type": "boolean", **meta}
    elif isinstance(field, Choice):
        out = {"type": "string", **meta, "enum": list(field.choices)}
    elif isinstance(field, NumberList):
        out = {"type": "array", "items": field_schema(field.inner), **meta}
        out["minItems"] = field.min_length
    elif isinstance(field, Obj):
        out = {**object_schema(field.nested), **meta}  # type: ignore[arg-type]
    elif isinstance(field, Text) or isinstance(field, mfields.String):
        out = {"type": "string", "pattern": TEXT_PATTERN, **meta}
    else:
        out = {"type": "object", **meta}
    return out if field.required else _nullable(out)


def object_schema(schema: type[Schema] | Schema) -> dict:
    """A ``Strict`` schema as a closed JSON object; a schema whose ``exactly_one`` names two
    fields takes one of them, given (non-null), and not the other (``if``/``then``/``else``)."""
    declared_fields = schema._declared_fields if isinstance(schema, type) else schema.fields
    out = {
        "type": "object",
        "properties": {name: field_schema(f) for name, f in declared_fields.items()},
        "required": [name for name, f in declared_fields.items() if f.required],
        "additionalProperties": False,
    }
    pair = getattr(schema, "exactly_one", None)
    if pair:
        first, second = pair
        kind = [t for t in out["properties"][second]["type"] if t != "null"]
        out["if"] = {"properties": {first: {"type": "null"}}}
        out["then"] = {"required": [second], "properties": {second: {"type": kind[0]}}}
        out["else"] = {"properties": {second: {"type": "null"}}}
    return out


def declared_schema(field: Any) -> dict:
    """One declared design field as JSON Schema, with its label and unit."""
    out = field_schema(declared.marshmallow_field(field))
    out["title"] = field.label
    if field.default is not None:
        out["default"] = field.default
    if field.unit:
        out["x-unit"] = field.unit
    return out


def block_schema(design: Any, block: str) -> dict:
    """One cell block (effect, assumptions, analysis_options) as a closed, nullable object."""
    names = declared.block_fields(design, block)
    return {
        "type": ["object", "null"],
        "properties": {f.name: declared_schema(f) for f in names},
        "additionalProperties": False,
    }


def distribution_schema(family: str) -> dict:
    """``{"family": name, ...parameters}`` for one family."""
    from .data_models import FAMILY_SCHEMAS

    out = object_schema(FAMILY_SCHEMAS[family])
    out["properties"]["family"] = {"const": family}
    out["required"] = ["family", *FAMILY_PARAMS[family]]
    return out


def data_schema(design: Any) -> dict:
    """The cell's data model (null only, when the cell takes none)."""
    families = families_for(design)
    keys = data_keys(design)
    if getattr(design, "simulation", None) is None or not families or not keys:
        return {"type": "null", "description": f"no data model for {design.cell}"}
    one = {"oneOf": [distribution_schema(f) for f in families]}
    if keys == ("groups",):
        props: dict = {"groups": {"type": "array", "items": one, "minItems": 2}}
    else:
        props = {k: one for k in keys}
    return {
        "type": ["object", "null"],
        "properties": props,
        "required": list(keys),
        "additionalProperties": False,
    }


def cell_branch(design: Any) -> dict:
    """``if`` the question names this cell, ``then`` its analyses, blocks and data model."""
    names = [a.name for a in design.analyses]
    then: dict = {
        "properties": {
            "analysis": {"enum": [*names, None]},
            **{block: block_schema(design, block) for block in BLOCKS},
            "simulation": {"properties": {"data": data_schema(design)}},
        },
        # what a complete question of the cell requires, by aim and find
        "allOf": [requirements(design)],
    }
    return {
        "if": {
            "properties": {
                "outcome": {"const": design.outcome},
                "layout": {"const": design.layout},
            },
            "required": ["outcome", "layout"],
        },
        "then": then,
        "description": design.label,
    }


def question_json_schema() -> dict:
    """The JSON Schema 2020-12 document of a posted question, for every registered cell."""
    from .question import QuestionSchema

    body = object_schema(QuestionSchema)
    props = body["properties"]
    props["outcome"] = {**props["outcome"], "type": "string", "enum": list(outcomes())}
    props["layout"] = {**props["layout"], "type": "string", "enum": list(layouts())}
    analyses = sorted({a.name for d in cells() for a in d.analyses})
    props["analysis"] = {**props["analysis"], "type": ["string", "null"], "enum": [*analyses, None]}
    for block in BLOCKS:
        props[block] = {**props[block], "type": ["object", "null"]}
    pairs = [
        {"properties": {"outcome": {"const": d.outcome}, "layout": {"const": d.layout}}}
        for d in cells()
    ]
    return {
        "$schema": DIALECT,
        "title": "sizewise question",
        "description": "A sample-size, power or detectable-effect question. The cell (outcome × "
        "layout) decides the analyses and the fields of effect, assumptions and "
        "analysis_options, and which of them a complete question gives (by aim and find, the "
        "margin's sign); rules across values (a target power above alpha, an effect in the "
        "hypothesis's direction, what the engine can compute) are checked by the API.",
        **body,
        "allOf": [{"anyOf": pairs}, *(cell_branch(d) for d in cells())],
    }


# ---------------------------------------------------------------------------------------------
# The question as OpenAPI components: the same schemas, split into one named variant per cell.

# Component names of the question's common blocks (their schemas are the ones above).
QUESTION_BLOCKS = {
    "hypothesis": "Hypothesis",
    "sample_size": "EnrolledSize",
    "adjustments": "Adjustments",
    "interim": "Interim",
    "assurance": "AssurancePrior",
    "simulation": "Simulation",
}


def camel(*words: str) -> str:
    """``("time_to_event", "two_groups")`` -> ``"TimeToEventTwoGroups"``."""
    return "".join(part.title() for word in words for part in str(word).split("_"))


def _ref(name: str) -> dict:
    return {"$ref": f"#/components/schemas/{name}"}


def _nullable_ref(name: str, schema: dict) -> dict:
    """A member that holds the named component or null, keeping the member's description."""
    out: dict = {"anyOf": [_ref(name), {"type": "null"}]}
    if schema.get("description"):
        out["description"] = schema["description"]
    return out


def _object(schema: dict) -> dict:
    """A nullable object schema as its non-null component (the member says null)."""
    out = {k: v for k, v in schema.items() if k != "description"}
    out["type"] = "object"
    return out


def _distribution_member(families: tuple[str, ...], description: str) -> dict:
    """One distribution of a data model: the family's component, or oneOf them on ``family``."""
    names = {f: f"{camel(f)}Distribution" for f in families}
    if len(families) == 1:
        return {**_ref(names[families[0]]), "description": description}
    return {
        "oneOf": [_ref(n) for n in names.values()],
        "discriminator": {
            "propertyName": "family",
            "mapping": {f: f"#/components/schemas/{n}" for f, n in names.items()},
        },
        "description": description,
    }


def question_components() -> dict[str, dict]:
    """The OpenAPI components of a posted question, from the same generators as the JSON Schema.

    ``Question`` is ``oneOf`` one variant per registered cell (``QuestionContinuousTwoGroups``
    …): the common fields of ``question_json_schema`` with ``outcome`` and ``layout`` fixed by
    ``const``, the cell's analyses, its ``effect``, ``assumptions`` and ``analysis_options``
    blocks and its data model — what the JSON Schema says in its ``if``/``then`` branches. The
    cell is named by two members, so no single-member discriminator applies: a client tells
    the variants apart by the ``outcome`` and ``layout`` constants.
    """
    from .catalogue import example
    from .question import QuestionSchema

    whole = question_json_schema()
    common = whole["properties"]
    out: dict[str, dict] = {}
    shared: dict[str, dict] = {}
    for name, schema in object_schema(QuestionSchema)["properties"].items():
        if name in QUESTION_BLOCKS:
            out[QUESTION_BLOCKS[name]] = _object(schema)
            shared[name] = _nullable_ref(QUESTION_BLOCKS[name], schema)
        else:
            shared[name] = common[name]
    out["Simulation"]["properties"]["data"] = {
        "type": "null",
        "description": "no data model: the cell simulates from its effect and assumptions",
    }
    for family in {f for d in cells() for f in families_for(d)}:
        out[f"{camel(family)}Distribution"] = distribution_schema(family)
    variants = []
    for design in cells():
        cell = camel(design.outcome, design.layout)
        props = dict(shared)
        props["outcome"] = {**common["outcome"], "const": design.outcome}
        props["layout"] = {**common["layout"], "const": design.layout}
        props["outcome"].pop("enum", None)
        props["layout"].pop("enum", None)
        names = [a.name for a in design.analyses]
        props["analysis"] = {**common["analysis"], "enum": [*names, None]}
        for block in BLOCKS:
            component = f"{cell}{camel(block)}"
            schema = block_schema(design, block)
            out[component] = {**_object(schema), "description": f"{block} of {design.label}"}
            props[block] = _nullable_ref(component, common[block])
        data = data_schema(design)
        if data.get("properties"):
            data_props = {
                key: (
                    {
                        "type": "array",
                        "items": _distribution_member(families_for(design), "one group"),
                        "minItems": 2,
                        "description": "one distribution per group, control first",
                    }
                    if key == "groups"
                    else _distribution_member(families_for(design), f"the {key} distribution")
                )
                for key in data["properties"]
            }
            out[f"{cell}Data"] = {
                **_object(data),
                "properties": data_props,
                "description": f"the data model of {design.label}",
            }
            simulation = {**out["Simulation"], "properties": dict(out["Simulation"]["properties"])}
            simulation["properties"]["data"] = _nullable_ref(
                f"{cell}Data",
                {
                    "description": "the data model; null draws the cell's own data from the effect "
                    "and assumptions"
                },
            )
            out[f"{cell}Simulation"] = simulation
            props["simulation"] = _nullable_ref(f"{cell}Simulation", common["simulation"])
        out[f"Question{cell}"] = {
            **{k: v for k, v in whole.items() if k not in ("$schema", "allOf", "title")},
            "properties": props,
            "description": f"A question on {design.label} ({design.outcome} × {design.layout}). "
            "What it requires beyond each field's type, by aim and find (the forms of the "
            "catalogue), is its if/then/else.",
            **requirements(design),
        }
        shown = example(design)
        if shown is not None:  # the catalogue's example of the cell, a complete question
            out[f"Question{cell}"]["examples"] = [shown]
        variants.append(_ref(f"Question{cell}"))
    out["Question"] = {
        "oneOf": variants,
        "description": whole["description"] + " One variant per cell: its outcome and layout "
        "are constants, so the pair names the variant.",
    }
    return out


# ---------------------------------------------------------------------------------------------
# What a complete question requires, by aim and find, from the design's declarations (forms,
# solved, estimation.forms, aims): the same rules ``designs.common.make_validate``,
# ``estimation_validate`` and ``rules.py`` check, written as ``if``/``then``/``else`` on the
# aim and ``anyOf`` over find and the forms. A field is *given* when posted non-null.

_BASE_TYPES = {
    "number": "number",
    "integer": "integer",
    "boolean": "boolean",
    "choice": "string",
    "number_list": "array",
}
_ABSENT = {"type": "null"}  # absent or null: not posted
# The question simulates a posted data model (resolve.from_data).
_DATA_MODEL = {
    "properties": {
        "method": {"anyOf": [{"const": "simulation"}, _ABSENT]},
        "simulation": {
            "type": "object",
            "required": ["data"],
            "properties": {"data": {"type": "object"}},
        },
    },
    "required": ["simulation"],
}


def _one(*values: Any) -> dict:
    """One of a few constants (``anyOf`` of ``const``: no inline enum to name)."""
    if len(values) == 1:
        return {"const": values[0]}
    return {"anyOf": [{"const": v} for v in values]}


def _fields_given(design: Any, given: tuple[str, ...], absent: set[str]) -> dict:
    """Blocks holding every field of ``given`` (non-null) and none of ``absent``."""
    by_name = {f.name: f for f in design.fields}
    out: dict = {"properties": {}, "required": []}
    for block in BLOCKS:
        need = [n for n in given if by_name[n].block == block]
        gone = sorted(n for n in absent if by_name[n].block == block and n not in need)
        if not need and not gone:
            continue
        props = {n: {"type": _BASE_TYPES[by_name[n].type]} for n in need}
        props.update({n: _ABSENT for n in gone})
        if need:
            out["properties"][block] = {"type": "object", "required": need, "properties": props}
            out["required"].append(block)
        else:
            out["properties"][block] = {"properties": props}
    if not out["required"]:
        out.pop("required")
    return out


def _testing_forms(design: Any, find_effect: bool) -> list[dict]:
    """The field sets a sample-size or power question (or, ``find_effect``, a detectable-effect
    question) gives: one form's fields, plus the solved field unless the form replaces it."""
    effect_names = {f.name for f in design.fields if f.block == "effect"}
    if find_effect:
        usable = [f for f in design.forms if not set(f) & effect_names] or [()]
    else:
        usable = list(design.forms)
    names = {n for form in usable for n in form}
    # a posted data model (simulated, find not effect) implies these: they may be left out
    implied = set(getattr(design.validate, "model_fields", ()) or ())
    out = []
    for form in usable:
        given, absent = tuple(form), names - set(form)
        if find_effect:
            absent |= effect_names
        elif set(form) & effect_names:
            absent |= {design.solved}
        else:
            given = (*given, design.solved)
        out.append(_fields_given(design, given, absent))
        if implied and not find_effect:
            out.append(
                {
                    **_DATA_MODEL,
                    "allOf": [
                        _fields_given(design, tuple(n for n in given if n not in implied), absent)
                    ],
                }
            )
    return out


def _methods(design: Any) -> dict:
    """The methods of the cell's testing analyses, each with the analyses it honors; a
    simulation block only when simulated: method simulation, or no method and a data model
    posted without the solved field it implies (resolve.method). Which analysis answers which
    aim is checked by the API (one branch per aim outgrows what test generators take)."""
    testing = {"superiority", "noninferiority", "equivalence"}

    def names(method: str) -> tuple:
        return tuple(
            a.name for a in design.analyses if method in a.methods and set(a.aims) & testing
        )

    simulated = {
        "properties": {
            "method": {"const": "simulation"},
            "analysis": _one(*names("simulation"), None),
        },
        "required": ["method"],
    }
    analytic = {
        "properties": {
            "method": _one("analytic", None),
            # no method named: a data model posted without the solved field is simulated
            "simulation": {"anyOf": [_ABSENT, _DATA_MODEL["properties"]["simulation"]]},
            "analysis": _one(*names("analytic"), None),
        }
    }
    return {
        "if": {"properties": {"method": {"const": "simulation"}}, "required": ["method"]},
        "then": simulated,
        "else": analytic,
    }


def _hypotheses(design: Any) -> list[dict]:
    """The testing aims the cell offers, each with its margin and sidedness."""
    aims = [a for a in design.aims() if a != "estimation"]
    sided = {"alternative": _one("one-sided", None)}
    out = []
    if "superiority" in aims:
        out.append(
            {
                "properties": {
                    "hypothesis": {
                        "anyOf": [
                            _ABSENT,
                            {"properties": {"aim": _one("superiority"), "margin": _ABSENT}},
                        ]
                    }
                },
            }
        )
    margin = {"type": "number"}
    if "noninferiority" in aims:
        higher = {"aim": {"const": "noninferiority"}, "higher_is_better": _one(True, None)}
        lower = {"aim": {"const": "noninferiority"}, "higher_is_better": {"const": False}}
        out.append(
            {
                "properties": {
                    **sided,
                    "hypothesis": {
                        "type": "object",
                        "required": ["aim", "margin"],
                        "anyOf": [
                            {"properties": {**higher, "margin": {**margin, "exclusiveMaximum": 0}}},
                            {
                                "required": ["higher_is_better"],
                                "properties": {
                                    **lower,
                                    "margin": {**margin, "exclusiveMinimum": 0},
                                },
                            },
                        ],
                    },
                },
                "required": ["hypothesis"],
            }
        )
    if "equivalence" in aims:
        out.append(
            {
                "properties": {
                    **sided,
                    "hypothesis": {
                        "type": "object",
                        "required": ["aim", "margin"],
                        "properties": {
                            "aim": {"const": "equivalence"},
                            "margin": {**margin, "exclusiveMinimum": 0},
                        },
                    },
                },
                "required": ["hypothesis"],
            }
        )
    return out


def group_count(design: Any) -> int | None:
    """The cell's number of groups when its layout fixes it (None: the question says it)."""
    try:
        count = design.groups({})
    except Exception:  # noqa: BLE001 - a count read from the question's fields
        return None
    return count if isinstance(count, int) else None


def _finds(estimation: bool, groups: int | None = None) -> dict[str, dict]:
    """find's cases: the sample size is absent when it is solved for, given otherwise (one
    number per group where the layout fixes their count)."""
    given: dict = {"type": "object"}
    if groups is not None:
        given["properties"] = {"per_group": {"minItems": groups, "maxItems": groups}}
    size = {"properties": {"sample_size": given}, "required": ["sample_size"]}
    if estimation:
        return {
            "sample_size": {
                "properties": {
                    "find": _one("sample_size", None),
                    "sample_size": _ABSENT,
                    "hypothesis": {
                        "required": ["half_width"],
                        "properties": {"half_width": {"type": "number"}},
                    },
                }
            },
            "precision": {
                "allOf": [size],
                "required": ["find"],
                "properties": {
                    "find": {"const": "precision"},
                    "hypothesis": {"properties": {"half_width": _ABSENT}},
                },
            },
        }
    return {
        "sample_size": {"properties": {"find": _one("sample_size", None), "sample_size": _ABSENT}},
        "power": {
            "allOf": [size],
            "required": ["find"],
            "properties": {
                "find": {"const": "power"},
                "target_power": _ABSENT,
                "allocation_rounding": {"anyOf": [_ABSENT, {"const": "each_group"}]},
            },
        },
        "effect": {
            "allOf": [size],
            "required": ["find"],
            # a posted data model has no single effect parameter to move
            "properties": {
                "find": {"const": "effect"},
                "simulation": {"properties": {"data": _ABSENT}},
                "allocation_rounding": {"anyOf": [_ABSENT, {"const": "each_group"}]},
            },
        },
    }


def _estimation(design: Any) -> dict:
    """A precision question (hypothesis.aim estimation): exactly one of the estimation forms,
    a two-sided analytic interval, no test level, power, clusters, comparisons or interim."""
    if design.estimation is None:
        return {"not": {}}
    forms = design.estimation.forms
    used = {n for form in forms for n in form}
    unused = {f.name: f for f in design.fields if f.name not in used}
    fixed: dict = {}
    for name, f in unused.items():  # accepted only at the declared default
        rule = _ABSENT if f.default is None else {"anyOf": [_ABSENT, {"const": f.default}]}
        fixed.setdefault(f.block, {})[name] = rule
    branches = []
    for form in forms:
        given = _fields_given(design, tuple(form), used - set(form))
        for block, props in fixed.items():
            target = given["properties"].setdefault(block, {"properties": {}})
            target.setdefault("properties", {}).update(props)
        branches.append(given)
    hypothesis: dict = {"margin": _ABSENT, "higher_is_better": _ABSENT}
    if not design.estimation.assurance:
        hypothesis["assurance"] = _ABSENT
    return {
        "properties": {
            "alpha": _ABSENT,
            "target_power": _ABSENT,
            "alternative": _one("two-sided", None),
            "method": _one("analytic", None),
            "interim": _ABSENT,
            "assurance": _ABSENT,
            "adjustments": {
                "properties": {"cluster": _ABSENT, "comparisons": _one(1, None)},
            },
            "hypothesis": {"properties": hypothesis},
        },
        "allOf": [
            {"anyOf": list(_finds(True, group_count(design)).values())},
            {"anyOf": branches},
        ],
    }


def _testing(design: Any) -> dict:
    """A sample-size, power or detectable-effect question on a testing aim the cell offers."""
    hypotheses = _hypotheses(design)
    if not hypotheses:
        return {"not": {}}
    cases = []
    for find, case in _finds(False, group_count(design)).items():
        cases.append({**case, "anyOf": _testing_forms(design, find == "effect")})
    alternative: dict = {}
    if not getattr(design, "directional", True):
        alternative = {"alternative": _one("two-sided", None)}
    elif getattr(design, "one_sided_only", False):
        alternative = {"alternative": _one("one-sided", None)}
    return {
        "properties": {
            **alternative,
            "hypothesis": {
                "properties": {"half_width": _ABSENT, "confidence": _ABSENT, "assurance": _ABSENT}
            },
        },
        "allOf": [{"anyOf": hypotheses}, {"anyOf": cases}, _methods(design)],
    }


def _allocation(design: Any) -> dict:
    """An allocation ratio (other than 1) and exact-ratio rounding only where the layout sizes
    its groups by a ratio (rules.allocation); an interim block only where the cell offers it."""
    from .vocabulary import takes_ratio

    out: dict = {}
    if not getattr(design, "sequential", False):  # the catalogue's interim: false
        out["interim"] = _ABSENT
    if takes_ratio(design):
        return out
    return {
        **out,
        "allocation_ratio": {"anyOf": [_ABSENT, {"const": 1}]},
        "allocation_rounding": {"anyOf": [_ABSENT, {"const": "each_group"}]},
    }


def requirements(design: Any) -> dict:
    """``if`` the question asks for precision, ``then`` the estimation forms, ``else`` a testing
    aim with find's forms: what the cell requires beyond each field's type and range."""
    estimation, testing = _estimation(design), _testing(design)
    for branch in (estimation, testing):
        if "properties" in branch:
            branch["properties"].update(_allocation(design))
    return {
        "if": {
            "properties": {
                "hypothesis": {
                    "type": "object",
                    "required": ["aim"],
                    "properties": {"aim": {"const": "estimation"}},
                }
            },
            "required": ["hypothesis"],
        },
        "then": estimation,
        "else": testing,
    }
