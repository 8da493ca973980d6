"""What the cell modules share: reading the question's blocks, the analysis and hypothesis checks,
group layouts, the analytic method block and the presence/consistency validator built from forms.

Stdlib only (the schema layer calls ``validate`` without importing numpy).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

from ..errors import QuestionError
from .base import BLOCKS, Design, Field

# --- reading the normalized question ----------------------------------------------------------


def values(q: dict, fields: tuple[Field, ...]) -> dict:
    """Return the cell's field values: effect, assumptions and analysis_options merged, with the
    declared defaults filled in for anything not posted."""
    out = {f.name: f.default for f in fields if f.default is not None}
    for block in BLOCKS:
        for k, v in (q.get(block) or {}).items():
            if v is not None:
                out[k] = v
    return out


def number(q: dict, fields: tuple[Field, ...], name: str, *, required: bool = True):
    """Return a declared numeric field as a float, checked against its range; None if optional."""
    decl = next(f for f in fields if f.name == name)
    value = values(q, fields).get(name)
    if value is None:
        if not required:
            return None
        raise QuestionError(decl.path, "is required for this question")
    why = decl.range_error(value)
    if why:
        raise QuestionError(decl.path, why)
    return float(value)


def tails(q: dict) -> int:
    """Return the number of tails of the test: 1 for "one-sided", else 2."""
    return 1 if q.get("alternative") == "one-sided" else 2


def hypothesis(q: dict) -> tuple[str, float | None, bool]:
    """Return (aim, margin, higher_is_better) of the normalized question."""
    h = q.get("hypothesis") or {}
    return h.get("aim", "superiority"), h.get("margin"), bool(h.get("higher_is_better", True))


def analysis_of(q: dict, design: Design, method: str | None = None) -> str:
    """Return the question's analysis (the cell's default when unset), refusing one the method
    or the hypothesis aim cannot honor, on field ``analysis``."""
    method = method or q.get("method") or "analytic"
    name = q.get("analysis") or design.default_analysis(q)
    offered = [a.name for a in design.analyses]
    if name not in offered:
        raise QuestionError(
            "analysis",
            f"'{name}' is not offered for {design.cell}; use one of {', '.join(offered)}",
        )
    honored = design.analyses_for(method)
    if name not in honored:
        raise QuestionError(
            "analysis",
            f"'{name}' is not offered with the {method} method for {design.cell}; that method "
            f"offers {', '.join(honored) or 'no analysis'}",
        )
    aim = hypothesis(q)[0]
    if aim not in design.analysis(name).aims:
        fit = design.analyses_for(method, aim)
        raise QuestionError(
            "analysis",
            f"'{name}' does not answer a {aim} question for {design.cell}"
            + (f"; use one of {', '.join(fit)}" if fit else f"; the {method} method offers none"),
        )
    return name


def check_aim(q: dict, design: Design) -> str:
    """Return the hypothesis aim, refusing one no analysis of the cell answers."""
    aim = hypothesis(q)[0]
    if aim not in design.aims():
        raise QuestionError(
            "hypothesis.aim",
            f"'{aim}' is not offered for {design.cell}; only {', '.join(design.aims())}",
        )
    return aim


def checked_analysis(q: dict, design: Design) -> str:
    """Refuse an aim the cell does not answer; return the analytic analysis of the question."""
    check_aim(q, design)
    return analysis_of(q, design, "analytic")


# --- group layouts ------------------------------------------------------------------------------


def one_group(q: dict) -> int:
    """Return the number of groups of a single-group or paired layout (one)."""
    return 1


def one_group_allocation(q: dict) -> list[float]:
    """Return the relative group sizes of a one-group layout ([1])."""
    return [1.0]


def two_groups(q: dict) -> int:
    """Return the number of groups of a two-group layout (two)."""
    return 2


def two_group_allocation(q: dict) -> list[float]:
    """Return the relative group sizes [control, treatment] from the allocation ratio."""
    return [1.0, float(q.get("allocation_ratio") or 1.0)]


def analytic_method(
    analysis: str, label: str, approximation: str, reference: str, notes: list[str], derived: dict
) -> dict:
    """Return the ``method`` block of an analytic record."""
    return {
        "method": "analytic",
        "analysis": analysis,
        "analysis_label": label,
        "approximation": approximation,
        "reference": reference,
        "derived": derived,
        "notes": notes,
    }


def bernoulli_only(q: dict, arms: list[dict], labels: list[str]) -> None:
    """A binary outcome is simulated with bernoulli groups only (``SimulationModel.check_models``)."""
    for arm, label in zip(arms, labels, strict=True):
        if arm["family"] != "bernoulli":
            raise QuestionError(
                f"simulation.data.{label}.family",
                f"a binary outcome needs bernoulli groups; got {arm['family']!r}",
            )


def no_warnings(q: dict, per_group: list[float]) -> list[str]:
    """A cell without approximation warnings."""
    return []


def fmt(x: float) -> str:
    """A number as the investigator would write it (up to 6 significant digits)."""
    return f"{x:g}"


# --- presence and consistency, from the declared forms ----------------------------------------


Rules = Callable[[dict, dict, str, bool], None]


def make_validate(
    fields: tuple[Field, ...],
    forms: tuple[tuple[str, ...], ...],
    solved: str,
    model_fields: tuple[str, ...] = (),
    rules: Rules | None = None,
) -> Callable[[dict, str, bool], dict[str, list[str]]]:
    """Return the cell's ``validate(blocks, find, from_data)``.

    ``blocks`` holds the posted effect, assumptions and analysis_options (already type-checked
    by the schema, or as posted to the engine). The returned errors are keyed by field path.
    Rules: a field sits in its declared block; the solved field is required unless find = effect
    (then forbidden: find = effect takes no effect block entries at all); exactly one form's
    fields are given (a form holding an effect field, e.g. group means, replaces the solved
    field); fields a posted data model implies (``model_fields``) may be left out.
    """
    by_name = {f.name: f for f in fields}

    def validate(blocks: dict, find: str, from_data: bool) -> dict[str, list[str]]:
        errors: dict[str, list[str]] = {}

        def add(name: str, message: str) -> None:
            errors.setdefault(by_name[name].path, []).append(message)

        posted: set[str] = set()
        for block in BLOCKS:
            for key, value in (blocks.get(block) or {}).items():
                decl = by_name.get(key)
                if decl is not None and decl.block != block:
                    errors.setdefault(f"{block}.{key}", []).append(
                        f"belongs in {decl.block}, not {block}"
                    )
                elif decl is not None and value is not None:
                    posted.add(key)
        effect_names = {f.name for f in fields if f.block == "effect"}
        usable = list(forms)
        if find == "effect":
            for name in sorted(posted & effect_names):
                why = (
                    "is solved for when find = effect; remove it"
                    if name == solved
                    else f"cannot be given when find = effect ({solved} is solved for); remove it"
                )
                add(name, why)
            usable = [f for f in forms if not set(f) & effect_names] or [()]
        form_names = {n for f in usable for n in f}
        given = [n for n in sorted(form_names) if n in posted]
        fits = [f for f in usable if set(given) <= set(f)]
        if not fits:
            shown = " or ".join(" + ".join(f) for f in usable)
            for name in given:
                add(name, f"give {shown}, not a mix; got {', '.join(given)}")
            chosen: tuple[str, ...] = ()
        else:
            chosen = max(fits, key=lambda f: len(set(f) & set(given)))
        alternatives = [f for f in usable if f != chosen and f]
        for name in chosen:
            if name in posted or (from_data and name in model_fields):
                continue
            hint = ""
            if not given and alternatives:
                hint = " (or give " + " or ".join(" + ".join(f) for f in alternatives) + ")"
            add(name, "is required" + hint)
        if find != "effect":
            replaced = bool(set(chosen) & effect_names)
            if solved in posted and replaced:
                add(solved, f"give {' + '.join(chosen)} or {solved}, not both")
            elif solved not in posted and not replaced:
                if not (from_data and solved in model_fields):
                    add(solved, "is required")
        if rules is not None:
            rules(errors, values(blocks, fields), find, from_data)
        return errors

    validate.model_fields = model_fields  # type: ignore[attr-defined]  # the JSON Schema reads it
    return validate


def raise_first(errors: dict[str, list[str]]) -> None:
    """Raise the first of ``validate``'s errors as a QuestionError (the engine's own check)."""
    for path, messages in errors.items():
        raise QuestionError(path, messages[0])


def stated_effect(q: dict, record: dict | None, fields, name: str):
    """The effect a sentence states: as posted, or the value solved for (find = effect)."""
    value = values(q, fields).get(name)
    if value is None and record and record.get("effect"):
        value = record["effect"]["value"]
    return value


# --- precision questions (hypothesis.aim = "estimation") ---------------------------------------


def aim_of(raw: object) -> str | None:
    """The posted hypothesis aim of a question (None when absent or not a word)."""
    hyp = raw.get("hypothesis") if isinstance(raw, Mapping) else None
    aim = hyp.get("aim") if isinstance(hyp, Mapping) else None
    return aim if isinstance(aim, str) else None


def estimation_validate(design: Design, blocks: dict) -> dict[str, list[str]]:
    """The cell's fields for an estimation question: exactly one of ``design.estimation.forms``;
    any other field is refused (posted at its declared default it is accepted, so a normalized
    question loads again)."""
    by_name = {f.name: f for f in design.fields}
    forms = design.estimation.forms
    used = {n for form in forms for n in form}
    errors: dict[str, list[str]] = {}
    posted: set[str] = set()
    for block in BLOCKS:
        for key, value in (blocks.get(block) or {}).items():
            decl = by_name.get(key)
            if decl is None or value is None:
                continue
            if decl.block != block:
                errors.setdefault(f"{block}.{key}", []).append(
                    f"belongs in {decl.block}, not {block}"
                )
            elif key in used:
                posted.add(key)
            elif value != decl.default:
                errors.setdefault(decl.path, []).append(
                    f"is not used when hypothesis.aim is estimation: a precision question for "
                    f"{design.cell} takes "
                    + " or ".join(" + ".join(form) for form in forms)
                    + "; remove it"
                )
    fits = [form for form in forms if posted <= set(form)]
    if not fits:
        shown = " or ".join(" + ".join(form) for form in forms)
        for name in sorted(posted):
            errors.setdefault(by_name[name].path, []).append(
                f"give {shown}, not a mix; got {', '.join(sorted(posted))}"
            )
        return errors
    chosen = max(fits, key=lambda form: len(set(form) & posted))
    others = [form for form in forms if form != chosen]
    for name in chosen:
        if name not in posted:
            hint = (
                " (or give " + " or ".join(" + ".join(f) for f in others) + ")"
                if others and not posted
                else ""
            )
            errors.setdefault(by_name[name].path, []).append(
                f"is required for an estimation question{hint}"
            )
    return errors


def validate_question_blocks(
    design: Design, blocks: dict, find: str, from_data: bool, aim: str | None
) -> dict[str, list[str]]:
    """The cell's own check of its blocks, by aim: estimation forms or the design's validate."""
    if aim == "estimation" and design.estimation is not None:
        return estimation_validate(design, blocks)
    return design.validate(blocks, find, from_data) or {}
