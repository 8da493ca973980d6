"""The engine's entry point: a normalized question in, a sealed result record out.

The flow is the same for every design: split alpha for multiple comparisons, solve (or evaluate)
the base n by formula or by simulation, then apply the design effect and dropout as ordered,
rounded-up steps. Only this module knows that order; designs and the simulator stay unaware.
"""

from __future__ import annotations

import copy
import math
import secrets
from collections.abc import Callable

from . import (
    adjust,
    assurance,
    cluster,
    designs,
    group_sequential,
    implied,
    multiplicity,
    precision,
    starting,
)
from .designs.common import analysis_of, check_aim, raise_first
from .errors import BudgetExceeded, EngineError, QuestionError, describe_failure
from .records import CAUTIONS, RECORD_VERSION, seal, size_warnings, versions

Executor = Callable[[list[dict]], list[dict]]
SMALL_GROUP = (
    10  # below this per group, large-sample approximations and simulated tests are fragile
)


def draw_seed() -> int:
    """Return a fresh seed in [0, 2**53) from the OS entropy pool (exact in JSON and JavaScript)."""
    return secrets.randbits(53)


def run_chunk(task: dict) -> dict:
    """Run one simulation chunk task (JSON in, JSON out); pure, so any process may run it."""
    from . import simulate

    return simulate.run_chunk(task)


def estimate_cost(question: dict) -> int:
    """Return an upper estimate of the random draws a simulation question needs (0 if analytic)."""
    if question.get("method") != "simulation":
        return 0
    from . import simulate

    return int(simulate.estimate_cost(question))


def compute(
    question: dict,
    *,
    progress: Callable[[float], None] | None = None,
    cancel: Callable[[], bool] | None = None,
    executor: Executor | None = None,
    budget: int | None = None,
) -> dict:
    """Answer a normalized question and return the sealed result record (see DEVELOPERS.md).

    Examples
    --------
    >>> from service.engine.examples import example_question
    >>> q = example_question()  # two means, d = 0.5, SD 1, two-sided 5%, 80% power
    >>> compute(q)["sample_size"]["per_group"]
    [64, 64]
    """
    q = copy.deepcopy(question)
    design = designs.get(q.get("outcome"), q.get("layout"))
    simulated = q.get("method") == "simulation"
    _check_question(q, design, simulated)
    if simulated:
        _check_simulation(q, budget)
    hooks = [_passthrough(h) for h in (progress, cancel, executor)]
    try:
        record = _answer(q, design, simulated, *hooks, budget)
    except EngineError:
        raise
    except _CallerError as exc:
        # the caller's own failure (lost lease, database down) goes back untouched
        raise exc.original from None
    except Exception as exc:  # numerics failing in an unforeseen corner still get a typed error
        # Users read the words; the exception travels on as the cause, for the logs.
        raise EngineError(f"the computation failed: {describe_failure(exc)}") from exc
    try:
        sealed = seal(record)
    except ValueError as exc:  # a value overflowed to infinity or NaN on the way
        raise EngineError(f"the computation failed: a result is not finite ({exc})") from exc
    if progress is not None:
        progress(1.0)
    return sealed


class _CallerError(Exception):
    """Carries an exception raised inside a caller's hook through the engine's error wrapping."""

    def __init__(self, original: BaseException):
        super().__init__(repr(original))
        self.original = original


def _passthrough(hook):
    if hook is None:
        return None

    def call(*args):
        try:
            return hook(*args)
        except EngineError:
            raise  # Cancelled and friends are the engine's own vocabulary
        except Exception as exc:
            raise _CallerError(exc) from exc

    return call


def _check_simulation(q: dict, budget: int | None) -> None:
    if q["simulation"].get("seed") is None:
        raise QuestionError("simulation.seed", "the engine needs a seed; draw one with draw_seed()")
    if budget is not None:
        estimate = estimate_cost(q)
        if estimate > budget:
            raise BudgetExceeded(estimate, budget)


def _check_question(q: dict, design, simulated: bool) -> None:
    """The engine's own check of what the schema validates: the cell's fields, aim, analysis."""
    if q.get("find") not in ("sample_size", "power", "effect", "precision"):
        raise QuestionError(
            "find",
            f"must be 'sample_size', 'power', 'effect' or 'precision'; got {q.get('find')!r}",
        )
    alternative = q.get("alternative", "two-sided")
    if alternative not in ("two-sided", "one-sided"):
        raise QuestionError(
            "alternative", f"must be 'two-sided' or 'one-sided'; got {alternative!r}"
        )
    if alternative == "one-sided" and not design.directional:
        raise QuestionError(
            "alternative",
            f"the tests of {design.cell} have no direction; only 'two-sided' applies",
        )
    if alternative == "two-sided" and design.one_sided_only:
        raise QuestionError(
            "alternative", f"the design of {design.cell} tests one-sided only; got 'two-sided'"
        )
    aim = check_aim(q, design)
    if aim == "estimation" or q["find"] == "precision":
        precision.check(q, design)
        return
    if aim != "superiority" and alternative != "one-sided":
        raise QuestionError(
            "alternative", f"a {aim} question is tested one-sided; got {alternative!r}"
        )
    if not simulated or not design.simulation:
        analysis_of(q, design, "analytic")
    from_data = bool(
        simulated
        and q["find"] != "effect"
        and isinstance((q.get("simulation") or {}).get("data"), dict)
    )
    blocks = {b: q.get(b) or {} for b in ("effect", "assumptions", "analysis_options")}
    raise_first(design.validate(blocks, q["find"], from_data))
    if group_sequential.active(q):
        group_sequential.check(q, design)
    multiplicity.check(q)


def _answer(q, design, simulated, progress, cancel, executor, budget=None) -> dict:
    if (q.get("hypothesis") or {}).get("aim") == "estimation":
        return _answer_estimation(q, design)
    alpha, bonferroni = adjust.alpha_for(q)
    # A posted data model is what is simulated: the effect stated is the one it implies.
    from_data = implied.reconcile(q, design) if simulated and q["find"] != "effect" else None
    pre_steps = [bonferroni] if bonferroni else []
    record = {
        "record_version": RECORD_VERSION,
        "question": q,
        "effect": None,
        "events": None,
        "type_i_error": None,
        "search": None,
        "warnings": [],
        "cautions": list(CAUTIONS),
    }
    find = q["find"]
    if q.get("assurance"):
        assurance.check(q, design)  # refuse before any work
    sim = None
    clustered = cluster.settings(q) is not None
    staged = group_sequential.active(q)  # interim analyses (checked above)
    # analytic: the maximum size is the fixed size × the inflation factor; simulated: the
    # sequential test itself is simulated (seqsim.py), its search started at the inflated size
    plan = group_sequential.design_drift(q, alpha) if staged and find != "power" else None
    if simulated and plan is not None:
        start_inflation, plan = plan["inflation"], None
    else:
        start_inflation = 1.0
    if clustered:
        part = cluster.answer(
            q,
            design,
            alpha,
            lambda per_group, start: _simulate(
                q, alpha, per_group, start, executor, progress, cancel, budget
            ),
        )
        part["sample_size"]["steps"] = pre_steps + part["sample_size"]["steps"]
        record["sample_size"] = part["sample_size"]
        record["effect"] = part["effect"]
        record["warnings"].extend(part["warnings"])
        sim, power, analyzed = part["sim"], part["power"], part["analyzed"]
    elif find == "sample_size":
        solution = None
        if not simulated:
            solution = design.solve_n(q, alpha)
        elif q.get("effect") and from_data is None:
            solution = starting.analytic_solution(design, q, alpha)
        if simulated:
            start = [n * start_inflation for n in solution.per_group] if solution else None
            sim = _simulate(q, alpha, None, start, executor, progress, cancel, budget)
            raw = [float(n) for n in sim["per_group"]]
        else:
            raw = solution.per_group
        if solution is not None:
            record["events"] = solution.details.get("events")
        interim_step = None
        if plan is not None:
            fixed = list(raw)
            raw, record["events"] = group_sequential.inflate(
                raw, record["events"], plan["inflation"]
            )
            interim_step = {
                "step": "interim",
                "inflation": plan["inflation"],
                "fixed_per_group_raw": fixed,
                "per_group_raw": list(raw),
            }
        final, steps = adjust.inflate(raw, q)
        if interim_step is not None:
            steps.insert(0, interim_step)
        base = _base_per_group(steps, raw)
        if record["events"] and design.events_timing is not None:
            record["events"] = {
                **record["events"],
                **design.events_timing(q, base, record["events"]),
            }
        power = sim["power"] if sim else _analytic_power(design, q, base, alpha)
        record["sample_size"] = {
            "per_group": final,
            "total": sum(final),
            "steps": pre_steps + steps,
        }
        if solution is not None and not simulated and solution.details.get("sample_size_details"):
            record["sample_size"]["details"] = solution.details["sample_size_details"]
        analyzed = base
    else:
        enrolled = list(q["sample_size"]["per_group"])
        effective, steps = adjust.deflate(enrolled, q)
        record["sample_size"] = {
            "per_group": enrolled,
            "total": sum(enrolled),
            "steps": pre_steps + steps,
            "analyzed_per_group": effective,
        }
        analyzed = effective
        if find == "effect" and simulated:
            # The simulation runs at whole analyzed numbers, as for find = power.
            whole = [int(math.floor(n + 1e-9)) for n in effective]
            sim = _simulate(q, alpha, whole, None, executor, progress, cancel, budget)
            record["effect"] = sim["effect"]
            power = sim["power"]
            analyzed = whole
        elif find == "effect":
            basis = effective
            if plan is not None:
                # the fixed design as powerful as this sequential one is IF times smaller
                basis = group_sequential.fixed_equivalent(effective, plan["inflation"])
            effect = design.solve_effect(q, basis, alpha)
            record["effect"] = effect
            solved = copy.deepcopy(q)
            solved["effect"][effect["field"]] = effect["value"]
            power = _analytic_power(design, solved, effective, alpha)
        elif simulated:
            whole = [int(math.floor(n + 1e-9)) for n in effective]
            sim = _simulate(q, alpha, whole, None, executor, progress, cancel, budget)
            power = sim["power"]
            analyzed = whole
        else:
            power = _analytic_power(design, q, effective, alpha)
    if sim is not None:
        record["type_i_error"] = sim["type_i_error"]
        record["search"] = sim.get("search")
        record["method"] = sim["method"]
        if sim.get("events"):
            record["events"] = {**(record["events"] or {}), "simulated": sim["events"]}
        record["warnings"].extend(sim.get("warnings", []))
        if from_data is not None:
            record["method"] = dict(record["method"], implied_effect=from_data)
            record["warnings"].extend(implied.warnings(from_data))
        repro = dict(sim["reproducibility"])
        if q["simulation"].get("data") is None and not clustered:
            # The analytic answer beside the simulated one, when both describe the same normal
            # data (for find = effect: the analytic power at the simulated effect); the
            # simulated analysis's own formula when it has one.
            basis = q
            if find == "effect":
                basis = copy.deepcopy(q)
                basis["effect"][record["effect"]["field"]] = record["effect"]["value"]
            if staged:
                exact = group_sequential.analytic_power(design, basis, analyzed, alpha)
            else:
                exact = starting.analytic_power(design, basis, analyzed, alpha)
            if exact is not None:
                power = dict(power, analytic=exact)
    else:
        record["method"] = design.describe(q)
        repro = {"seed": None, "bit_generator": None, "seed_scheme": None, "chunk_size": None}
    if clustered:
        record["method"] = dict(
            record["method"], notes=[*record["method"].get("notes", []), *cluster.method_notes(q)]
        )
        if record["method"]["method"] == "analytic":
            record["method"].update(
                approximation="cluster-level t test (noncentral t, k₁ + k₂ − 2 df) with design effect",
                reference="Donner & Klar (2000); Eldridge, Ashby & Kerry (2006)",
            )
    if staged and simulated:
        sequential = dict(sim["sequential"], per_group=analyzed)
        record["sequential"] = group_sequential.simulated_block(
            q, alpha, sequential, record["sample_size"]["per_group"]
        )
        record["method"] = dict(
            record["method"],
            notes=[*record["method"].get("notes", []), group_sequential.simulated_note(q)],
        )
    elif staged:
        basis = q
        if record["effect"] is not None:
            basis = copy.deepcopy(q)
            basis["effect"][record["effect"]["field"]] = record["effect"]["value"]
        part = group_sequential.answer(
            design,
            basis,
            alpha,
            analyzed,
            record["sample_size"]["per_group"],
            plan,
            record["events"],
        )
        record["sequential"] = part["block"]
        power = dict(power, estimate=part["power"])
        record["method"] = dict(
            record["method"],
            notes=[*record["method"].get("notes", []), group_sequential.note(q)],
        )
    note = _alpha_note(q, design)
    if note:
        record["method"] = dict(record["method"], alpha_note=note)
    record["power"] = power
    if multiplicity.active(q):
        # Holm or Hochberg named for the comparisons: their power at the Bonferroni size
        record["multiplicity"] = multiplicity.block(q, power["estimate"])
    if q.get("assurance"):
        record["assurance"] = assurance.block(q, design, analyzed, alpha, power["estimate"])
    repro["versions"] = versions()
    record["reproducibility"] = repro
    record["warnings"].extend(_warnings(design, q, analyzed))
    record["warnings"].extend(size_warnings(record))
    return record


def _answer_estimation(q: dict, design) -> dict:
    """A precision question: the n whose interval is narrow enough, or the half-width a given
    n achieves; dropout applies as usual, ``power`` is null and ``precision`` says the rest."""
    record = {
        "record_version": RECORD_VERSION,
        "question": q,
        "effect": None,
        "events": None,
        "type_i_error": None,
        "search": None,
        "power": None,
        "warnings": [],
        "cautions": list(CAUTIONS),
    }
    if q["find"] == "sample_size":
        # alpha = 1 − confidence: the interval's two-sided level, for the cell's solve_n
        raw = design.solve_n(q, 1.0 - q["hypothesis"]["confidence"]).per_group
        final, steps = adjust.inflate(raw, q)
        analyzed = _base_per_group(steps, raw)
        record["sample_size"] = {"per_group": final, "total": sum(final), "steps": steps}
    else:
        enrolled = list(q["sample_size"]["per_group"])
        analyzed, steps = adjust.deflate(enrolled, q)
        if min(analyzed) < 2:
            raise QuestionError(
                "sample_size.per_group",
                f"leaves {min(analyzed):g} analyzed in a group after dropout; an interval needs "
                "at least 2",
            )
        record["sample_size"] = {
            "per_group": enrolled,
            "total": sum(enrolled),
            "steps": steps,
            "analyzed_per_group": analyzed,
        }
    record["method"] = design.describe(q)
    record["precision"] = precision.record_block(
        q, design, analyzed, record["method"]["analysis_label"]
    )
    record["reproducibility"] = {
        "seed": None,
        "bit_generator": None,
        "seed_scheme": None,
        "chunk_size": None,
        "versions": versions(),
    }
    record["warnings"].extend(_warnings(design, q, analyzed))
    record["warnings"].extend(size_warnings(record))
    return record


def _alpha_note(q: dict, design) -> str | None:
    """Say which level a non-inferiority or equivalence answer used and what guidance expects."""
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    if aim == "superiority":
        return None
    what = "non-inferiority" if aim == "noninferiority" else "equivalence"
    level, source = 0.025, "the level regulatory guidance expects of such trials (ICH E9, 1998)"
    if aim == "equivalence":
        level, source = design.equivalence_alpha, design.equivalence_alpha_source
    text = (
        f"one-sided alpha {q['alpha']:g} for each {what} test; one-sided {level:g} is {source} "
        "and the default when no alpha is posted"
    )
    if q["alpha"] > level:
        text += f"; the {q['alpha']:g} used here is above it"
    return text


def _analytic_power(design, q, per_group, alpha) -> dict:
    return {
        "estimate": float(design.power(q, per_group, alpha)),
        "mcse": None,
        "ci95": None,
        "replicates": None,
    }


def _base_per_group(steps: list[dict], raw: list[float]) -> list[int]:
    for step in steps:
        if step.get("step") == "base":
            return list(step["per_group"])
    return [math.ceil(n - 1e-9) for n in raw]


def _simulate(q, alpha, per_group, start, executor, progress, cancel, budget) -> dict:
    from . import simulate

    return simulate.answer(
        q,
        alpha,
        per_group=per_group,
        start=start,
        executor=executor,
        progress=progress,
        cancel=cancel,
        budget=budget,
    )


def null_effect_note(q: dict) -> str | None:
    """The note for a find = power question whose assumed effect is the null value, else None.

    Answered with the same words for every cell and method: the power is then the size.
    """
    if q.get("find") != "power" or (q.get("hypothesis") or {}).get("aim", "superiority") != (
        "superiority"
    ):
        return None
    design = designs.get(q.get("outcome"), q.get("layout"))
    name = design.solved
    values = {**(q.get("effect") or {}), **design.derive(q)}
    value = values.get(name)
    if value is None or value != design.null_effect(q):
        return None
    return (
        f"the assumed effect is the null value (effect.{name} = {value:g}): the power shown is "
        "the size of the test, the chance of rejecting when there is no effect (alpha for the "
        "normal and t approximations; the simulated rejection rate for a simulation)"
    )


def _warnings(design, q, per_group) -> list[str]:
    notes = []
    null_note = null_effect_note(q)
    if null_note:
        notes.append(null_note)
    if per_group and min(per_group) < SMALL_GROUP:
        notes.append(
            f"fewer than {SMALL_GROUP} analyzed per group ({min(per_group):g}); large-sample "
            "approximations may be poor and the answer is sensitive to the assumptions"
        )
    notes.extend(design.warnings_for(q, per_group))
    return notes
