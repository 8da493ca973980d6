"""Binary outcome, two-stage single-arm phase II study: Simon's (1989) optimal and minimax designs
by exact enumeration (``engine/two_stage.py``), and the power and type I error of a given design.

find = sample_size answers with the design's maximum n (per_group = [n]); the stage rules go to
the record's ``sample_size.details.two_stage``. find = power takes a posted design (stage1_size,
stage1_max_responses, max_responses, and n as the sample size) and reports its exact power, its
type I error, the probability of early termination and the expected size in ``method.derived``.
"""

from __future__ import annotations

import math

from .. import two_stage
from ..errors import QuestionError
from ..quantiles import z
from .base import (
    Analysis,
    DecisionRule,
    Design,
    EffectAxis,
    Field,
    Phrases,
    SimulationModel,
    Solution,
)
from .common import (
    analysis_of,
    analytic_method,
    bernoulli_only,
    check_aim,
    fmt,
    make_validate,
    no_warnings,
    number,
    one_group,
    one_group_allocation,
    stated_effect,
    values,
)

_PROPORTION = {
    "unit": "proportion",
    "minimum": 0,
    "maximum": 1,
    "exclusive_minimum": True,
    "exclusive_maximum": True,
}
STAGE_FIELDS = ("stage1_size", "stage1_max_responses", "max_responses")
FIELDS = (
    Field(
        "p",
        "effect",
        "number",
        "Response rate at which the treatment is worth further study (p1 in Simon's notation).",
        "response rate worth pursuing",
        **_PROPORTION,
    ),
    Field(
        "p_null",
        "assumptions",
        "number",
        "Response rate at which the treatment is not worth further study (p0).",
        "uninteresting response rate",
        **_PROPORTION,
    ),
    Field(
        "criterion",
        "analysis_options",
        "choice",
        "Which design to choose: the smallest expected size when the treatment is not worth "
        "pursuing (optimal) or the smallest maximum size (minimax).",
        "design criterion",
        choices=("optimal", "minimax"),
        default="optimal",
    ),
    Field(
        "max_n",
        "analysis_options",
        "integer",
        "Largest total size the search looks at (default: twice the single-stage normal "
        "approximation plus 10).",
        "largest total size searched",
        minimum=4,
        maximum=two_stage.LARGEST_N,
    ),
    Field(
        "stage1_size",
        "analysis_options",
        "integer",
        "Patients in stage 1 of a given design (n1; find = power only).",
        "stage 1 size",
        minimum=1,
    ),
    Field(
        "stage1_max_responses",
        "analysis_options",
        "integer",
        "Stop after stage 1 when at most this many respond (r1; find = power only).",
        "stage 1 stopping bound",
        minimum=0,
    ),
    Field(
        "max_responses",
        "analysis_options",
        "integer",
        "The treatment is called promising when more than this many of all patients respond "
        "(r; find = power only).",
        "final bound",
        minimum=0,
    ),
)
FORMS = (("p_null",),)
ANALYSES = (
    Analysis(
        "simon_two_stage",
        "Simon's two-stage design (exact binomial)",
        ("analytic", "simulation"),
        ("superiority",),
        "Simon 1989; exact enumeration of the two binomial stages",
        size_search="the total size n of the design that best meets the design criterion "
        "among every two-stage design up to the searched maximum",
    ),
)
_WORDS = {"optimal": "optimal", "minimax": "minimax"}


def _stage_rules(errors: dict, v: dict, find: str, from_data: bool) -> None:
    given = [name for name in STAGE_FIELDS if v.get(name) is not None]
    if find == "power":
        for name in STAGE_FIELDS:
            if v.get(name) is None:
                errors.setdefault(f"analysis_options.{name}", []).append(
                    "is required for find = power (the design whose power is computed)"
                )
    else:
        for name in given:
            errors.setdefault(f"analysis_options.{name}", []).append(
                f"is given only with find = power; find = {find} searches the design"
            )
    if find != "sample_size" and v.get("max_n") is not None:
        errors.setdefault("analysis_options.max_n", []).append(
            "is used only with find = sample_size"
        )


validate = make_validate(FIELDS, FORMS, "p", ("p",), rules=_stage_rules)


def _rate(q: dict, name: str) -> float:
    return number(q, FIELDS, name)


def _setup(q: dict) -> tuple[float, float]:
    """Check aim, analysis, direction and adjustments; return (p0, p1)."""
    check_aim(q, DESIGN)
    analysis_of(q, DESIGN, "analytic")
    p0, p1 = _rate(q, "p_null"), _rate(q, "p")
    if not p1 > p0:
        raise QuestionError(
            "effect.p",
            f"must be above p_null ({p0:g}): the design looks for a higher response rate; got "
            f"{p1:g}",
        )
    if q.get("alternative") == "two-sided":
        raise QuestionError("alternative", "Simon's two-stage design is one-sided")
    if q.get("assurance"):
        raise QuestionError(
            "assurance",
            "is not offered for a two-stage design: its power belongs to one design, found at "
            "the assumed response rate",
        )
    adjustments = q.get("adjustments") or {}
    if adjustments.get("dropout"):
        raise QuestionError(
            "adjustments.dropout",
            "is not applied to a two-stage design: its stage rules count evaluable patients; "
            "plan to replace patients who cannot be evaluated",
        )
    return p0, p1


def _default_max_n(p0: float, p1: float, alpha: float, target: float) -> int:
    """Twice the one-sided single-stage normal-approximation n, plus 10 (within the limit)."""
    za, zb = z(1 - alpha), z(target)
    single = (za * math.sqrt(p0 * (1 - p0)) + zb * math.sqrt(p1 * (1 - p1))) ** 2 / (p1 - p0) ** 2
    return int(min(two_stage.LARGEST_N, math.ceil(2 * single) + 10))


def _searched(q: dict, alpha: float) -> dict:
    p0, p1 = _setup(q)
    target = float(q["target_power"])
    v = values(q, FIELDS)
    max_n = int(v.get("max_n") or _default_max_n(p0, p1, alpha, target))
    return two_stage.search(p0, p1, float(alpha), target, max_n)


def _block(found: dict, criterion: str) -> dict:
    other = "minimax" if criterion == "optimal" else "optimal"
    return {
        "criterion": criterion,
        **found[criterion].to_dict(),
        "searched_max_n": found["searched_max_n"],
        "other_criterion": {"criterion": other, **found[other].to_dict()},
    }


def solve_n(q: dict, alpha: float) -> Solution:
    """The chosen design's maximum n; its stage rules (and the other criterion's) as details."""
    found = _searched(q, alpha)
    criterion = values(q, FIELDS)["criterion"]
    chosen = found[criterion]
    return Solution(
        per_group=[float(chosen.n)],
        details={"sample_size_details": {"two_stage": _block(found, criterion)}},
    )


def _posted(q: dict, n: int) -> tuple[int, int, int]:
    """The posted design (n1, r1, r), checked against n."""
    v = values(q, FIELDS)
    n1, r1, r = (int(v[name]) for name in STAGE_FIELDS)
    if not n1 < n:
        raise QuestionError(
            "analysis_options.stage1_size", f"must be below the total size {n}; got {n1}"
        )
    if not r1 < n1:
        raise QuestionError(
            "analysis_options.stage1_max_responses",
            f"must be below the stage 1 size {n1}; got {r1}",
        )
    if not r1 <= r < n:
        raise QuestionError(
            "analysis_options.max_responses",
            f"must be at least the stage 1 bound {r1} and below the total size {n}; got {r}",
        )
    return n1, r1, r


def _whole(n: float) -> int:
    return int(math.floor(float(n) + 1e-9))


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Exact power: of the posted design (find = power), else of the searched design at n."""
    p0, p1 = _setup(q)
    n = _whole(per_group[0])
    if values(q, FIELDS).get("stage1_size") is None:
        found = _searched(q, alpha)[values(q, FIELDS)["criterion"]]
        if found.n != n:
            raise QuestionError(
                "sample_size.per_group", f"the searched design has n = {found.n}; got {n}"
            )
        return found.power
    n1, r1, r = _posted(q, n)
    return two_stage.operating(n1, r1, n, r, p1)[0]


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    raise QuestionError(
        "find",
        "find = effect is not offered for a two-stage design; ask for the sample size (the "
        "design) or the power of a given design",
    )


def derive(q: dict) -> dict:
    """A posted design's operating characteristics under p0 and p1 (find = power), else {}."""
    v = values(q, FIELDS)
    size = (q.get("sample_size") or {}).get("per_group")
    if v.get("stage1_size") is None or not size or v.get("p") is None:
        return {}
    n = _whole(size[0])
    n1, r1, r = _posted(q, n)
    out = two_stage.rules(n1, r1, n, r, float(v["p_null"]), float(v["p"])).to_dict()
    return {f"design_{k}": x for k, x in out.items()}


def describe(q: dict) -> dict:
    p0, p1 = _setup(q)
    criterion = values(q, FIELDS)["criterion"]
    notes = [
        "Stage 1 treats n1 patients and stops when at most r1 respond; otherwise n − n1 more are "
        "treated and the treatment is called promising when more than r of all n respond.",
        "Type I error = P(promising | p_null) ≤ alpha (one-sided); power = P(promising | p). "
        "Both are exact binomial sums over the stage-1 and stage-2 responses.",
    ]
    if q.get("find") == "sample_size":
        notes.append(
            f"The {_WORDS[criterion]} design: "
            + (
                "the smallest expected size under p_null among the designs meeting alpha and power"
                if criterion == "optimal"
                else "the smallest maximum size n, then the smallest expected size under p_null"
            )
            + ", found by enumerating every n up to the searched maximum, every n1 < n, r1 < n1 "
            "and r (sample_size.details.two_stage)."
        )
    else:
        notes.append("The posted design's operating characteristics are in method.derived.")
    return analytic_method(
        "simon_two_stage",
        DESIGN.analysis("simon_two_stage").label,
        "exact binomial enumeration of both stages",
        "Simon (1989), Controlled Clin Trials 10:1",
        notes,
        derive(q),
    )


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    return [{"family": "bernoulli", "p": _rate(q, "p")}]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    p0 = _rate(q, "p_null")
    return [{"family": "bernoulli", "p": p0}], f"response rate set to p_null ({p0:g})"


def effect_axis(q: dict, rule: DecisionRule) -> EffectAxis:
    p0 = _rate(q, "p_null")
    return EffectAxis(p0, 1, 1.0 - p0)


def settings(q: dict) -> dict:
    """The posted stage rules; a simulation checks a given design (find = power) only."""
    if q.get("find") != "power":
        raise QuestionError(
            "find",
            "a simulated two-stage question checks a given design: use find = power with "
            "stage1_size, stage1_max_responses and max_responses",
        )
    n1, r1, r = _posted(q, _whole(q["sample_size"]["per_group"][0]))
    return {"stage1_size": n1, "stage1_max_responses": r1, "max_responses": r}


def implied_fields(q: dict, arms: list[dict]) -> dict:
    if arms and arms[0]["family"] == "bernoulli":
        return {"fields": {"p": arms[0]["p"]}}
    return {"fields": {}}


SIMULATION = SimulationModel(
    data_keys=("group",),
    default_data=default_data,
    null_data=null_data,
    kernels={"simon_two_stage": "two_stage"},
    effect_axis=effect_axis,
    check_models=bernoulli_only,
    settings=settings,
    implied_fields=implied_fields,
    min_size=2,
    draws_words="draws the stage-1 and the stage-2 response counts directly (binomial, by "
    "inverting one uniform each; stop after stage 1 at r1 or fewer responses, promising at "
    "more than r in total)",
)


# --- phrases ------------------------------------------------------------------------------------


def effect_sentence(q: dict, record: dict | None) -> str:
    value = stated_effect(q, record, FIELDS, "p")
    return (
        "the response rate worth pursuing"
        if value is None
        else f"a response rate of {fmt(value)} worth pursuing"
    )


def assumptions_sentence(q: dict) -> str:
    p0 = values(q, FIELDS).get("p_null")
    return "" if p0 is None else f"an uninteresting response rate of {fmt(p0)}"


def _rule_words(d: dict) -> str:
    more = d["n"] - d["n1"]
    return (
        f"treat {d['n1']} patients in stage 1 and stop if {d['r1']} or fewer respond; otherwise "
        f"treat {more} more ({d['n']} in total) and call the treatment promising if more than "
        f"{d['r']} of the {d['n']} respond"
    )


def _numbers(d: dict) -> str:
    return (
        f"the probability of stopping after stage 1 is {d['pet_null']:.2f} and the expected "
        f"size is {d['expected_n_null']:.1f} when the response rate is the uninteresting one; "
        f"the exact type I error is {d['type_i_error']:.4f} and the exact power "
        f"{d['power']:.4f}"
    )


def size_sentence(record: dict) -> str:
    """The design's maximum and expected sizes (found or posted): its stage rules count
    evaluable patients and no dropout is added (``_setup`` refuses it), so nothing is "before
    adjustment" and the posted n is a maximum, not the number enrolled."""
    found = _design(record)
    if found is None:
        return ""
    d, searched = found
    which = f"the {d['criterion']}" if searched else "the posted"
    return (
        f"{which} two-stage design enrolls {d['expected_n_null']:.1f} participants on average "
        f"when the response rate is the uninteresting one, and at most {d['n']}"
    )


def _design(record: dict) -> tuple[dict, bool] | None:
    """The record's design and its exact characteristics, and whether it was found (not
    posted): the found block of find = sample_size, or a posted design's ``method.derived``."""
    block = ((record.get("sample_size") or {}).get("details") or {}).get("two_stage")
    if block:
        return block, True
    derived = (record.get("method") or {}).get("derived") or {}
    if "design_n1" in derived:
        return {k.removeprefix("design_"): v for k, v in derived.items()}, False
    return None


def grid_words(details: dict | None) -> str:
    """A grid cell's design in brief: its stage rules and its expected size under p_null ('' for
    a cell without a found design: find = power keeps the posted design in every cell)."""
    d = (details or {}).get("two_stage")
    if not d:
        return ""
    return f"{d['r1']}/{d['n1']}, {d['r']}/{d['n']} ({d['expected_n_null']:.1f})"


def _rates(record: dict) -> tuple[str, str]:
    v = values(record["question"], FIELDS)
    return fmt(v["p_null"]), fmt(v["p"])


def answer_figures(record: dict) -> list[tuple[str, str]]:
    """The design's maximum and expected sizes and its exact power and type I error, each
    labelled with what it is (the maximum is enrolled only when the study reaches stage 2)."""
    found = _design(record)
    if found is None:
        return []
    d, _ = found
    p0, p1 = _rates(record)
    return [
        (f"{d['n']:,}", "enrolled at most (when the study continues to stage 2)"),
        (
            f"{d['expected_n_null']:.1f}",
            f"enrolled on average when the true response rate is {p0} (uninteresting)",
        ),
        (f"{d['power']:.4f}", f"exact power when the true response rate is {p1} (worth pursuing)"),
        (
            f"{d['type_i_error']:.4f}",
            f"exact type I error when the true response rate is {p0} (uninteresting)",
        ),
    ]


def stages_table(record: dict) -> dict | None:
    """The design's two stages, in place of adjustment steps: none is made (dropout is refused
    in ``_setup``: the stage rules count evaluable patients)."""
    found = _design(record)
    if found is None:
        return None
    d, searched = found
    p0, p1 = _rates(record)
    which = (
        f"Simon's {d['criterion']} design, found by exact search among every two-stage design "
        f"up to n = {d['searched_max_n']}."
        if searched
        else "The posted design."
    )
    return {
        "title": "Stages",
        "name_heading": "Stage",
        "caption": f"{which} No dropout adjustment is made: the stage rules count evaluable "
        "patients, so replace patients who cannot be evaluated.",
        "heading": "Patients (cumulative)",
        "rows": [
            {
                "name": "Stage 1",
                "detail": f"treat n1 = {d['n1']}; stop when r1 = {d['r1']} or fewer respond "
                f"(probability of stopping {d['pet_null']:.2f} at the uninteresting rate {p0}, "
                f"{d['pet_alternative']:.2f} at the rate worth pursuing {p1})",
                "result": f"{d['n1']:,}",
            },
            {
                "name": "Stage 2",
                "detail": f"treat {d['n'] - d['n1']} more; call the treatment promising when "
                f"more than r = {d['r']} of the n = {d['n']} respond",
                "result": f"{d['n']:,}",
            },
        ],
    }


def details_sentence(record: dict) -> str:
    """The stage rules in words (a design found, or a posted design's characteristics)."""
    found = _design(record)
    if found is None:
        return ""
    d, searched = found
    if searched:
        other = d["other_criterion"]
        return (
            f" Simon's {d['criterion']} two-stage design (searched up to n = "
            f"{d['searched_max_n']}): {_rule_words(d)} (r1/n1 = {d['r1']}/{d['n1']}, r/n = "
            f"{d['r']}/{d['n']}). Under it, {_numbers(d)}. For comparison, the "
            f"{other['criterion']} design is {other['r1']}/{other['n1']}, {other['r']}/"
            f"{other['n']} (expected size {other['expected_n_null']:.1f})."
        )
    return (
        f" The design is to {_rule_words(d)} (r1/n1 = {d['r1']}/{d['n1']}, r/n = "
        f"{d['r']}/{d['n']}); {_numbers(d)}."
    )


# --- the operating characteristic ----------------------------------------------------------------

CURVE_POINTS = 41


def _chosen(record: dict) -> tuple[int, int, int, int]:
    """The design the record answers with: the one found (find = sample_size) or posted."""
    block = ((record.get("sample_size") or {}).get("details") or {}).get("two_stage")
    if block:
        return block["n1"], block["r1"], block["n"], block["r"]
    q = record["question"]
    v = values(q, FIELDS)
    n = _whole(q["sample_size"]["per_group"][0])
    return int(v["stage1_size"]), int(v["stage1_max_responses"]), n, int(v["max_responses"])


def operating_curve(record: dict) -> dict:
    """The chosen design's exact probability of calling the treatment promising against the
    true response rate (from p0 − (p1 − p0) to p1 + (p1 − p0), within 0 and 1), with p0 (the
    type I error) and p1 (the power) marked. A two-stage design's size is fixed by its stage
    rules, so power against the enrolled size (other n, same rules) would describe designs
    nobody chose."""
    q = record["question"]
    v = values(q, FIELDS)
    p0, p1 = float(v["p_null"]), float(v["p"])
    n1, r1, n, r = _chosen(record)
    lo, hi = max(0.0, p0 - (p1 - p0)), min(1.0, p1 + (p1 - p0))
    step = (hi - lo) / (CURVE_POINTS - 1)
    rates = sorted({lo + i * step for i in range(CURVE_POINTS)} | {p0, p1})
    power_at = [two_stage.operating(n1, r1, n, r, p)[0] for p in rates]
    alpha_0, power_1 = (two_stage.operating(n1, r1, n, r, p)[0] for p in (p0, p1))
    return {
        "title": f"Power of the design r1/n1 = {r1}/{n1}, r/n = {r}/{n} against the true "
        "response rate",
        "x_label": "True response rate",
        "y_label": "Probability of calling the treatment promising",
        "x": rates,
        "power": power_at,
        "marks": [
            {
                "x": p0,
                "power": alpha_0,
                "label": f"uninteresting rate {fmt(p0)}: type I error {alpha_0:.4f}",
            },
            {
                "x": p1,
                "power": power_1,
                "label": f"rate worth pursuing {fmt(p1)}: power {power_1:.4f}",
            },
        ],
        "caption": (
            f"The exact probability that the two-stage design (r1/n1 = {r1}/{n1}, r/n = "
            f"{r}/{n}) calls the treatment promising, for each true response rate: at the "
            f"uninteresting rate {fmt(p0)} it is the type I error ({alpha_0:.4f}), at the rate "
            f"worth pursuing {fmt(p1)} the power ({power_1:.4f}). The design's size is fixed by "
            "its stage rules, so its power is drawn against the response rate, not against the "
            "enrolled size."
        ),
    }


def _contrast(q: dict) -> float | None:
    v = values(q, FIELDS)
    if v.get("p") is None or v.get("p_null") is None:
        return None
    return float(v["p"]) - float(v["p_null"])


DESIGN = Design(
    outcome="binary",
    layout="two_stage",
    label="Binary outcome, two-stage single-arm study (Simon)",
    fields=FIELDS,
    forms=FORMS,
    solved="p",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "simon_two_stage",
    groups=one_group,
    allocation=one_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(
        effect=effect_sentence,
        assumptions=assumptions_sentence,
        details=details_sentence,
        size=size_sentence,
        figures=answer_figures,
        stages=stages_table,
        enrolled="Total size n (enrolled at most, when the study continues to stage 2)",
        grid_column=(
            "Stage rules r1/n1, r/n (expected size at the uninteresting rate)",
            grid_words,
        ),
    ),
    example="northbridge_phase2_two_stage.json",
    contrast=_contrast,
    null_effect=lambda q: values(q, FIELDS).get("p_null"),
    one_sided_only=True,
    operating_curve=operating_curve,
    notes=(
        "find = sample_size finds Simon's optimal or minimax design (analysis_options.criterion); "
        "find = power gives a posted design's exact power and type I error.",
    ),
)
