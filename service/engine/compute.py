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

from . import adjust, designs
from .errors import BudgetExceeded, EngineError, QuestionError
from .records import CAUTIONS, RECORD_VERSION, seal, versions

Executor = Callable[[list[dict]], list[dict]]
SMALL_ARM = 10  # below this per arm, large-sample approximations and simulated tests are fragile


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
    >>> compute(q)["sample_size"]["per_arm"]
    [64, 64]
    """
    q = copy.deepcopy(question)
    try:
        design = designs.get(q["design"])
    except KeyError:
        raise QuestionError(
            "design",
            f"unknown design {q.get('design')!r}; allowed: {', '.join(designs.DESIGN_NAMES)}",
        ) from None
    simulated = q.get("method") == "simulation"
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
        raise EngineError(f"the computation failed: {type(exc).__name__}: {exc}") from exc
    if progress is not None:
        progress(1.0)
    return seal(record)


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


def _answer(q, design, simulated, progress, cancel, executor, budget=None) -> dict:
    alpha, bonferroni = adjust.alpha_for(q)
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
    sim = None
    if find == "sample_size":
        solution = None
        if not simulated or q.get("effect"):
            solution = _analytic_or_none(design, q, alpha, required=not simulated)
        if simulated:
            start = solution.per_arm if solution else None
            sim = _simulate(q, alpha, None, start, executor, progress, cancel, budget)
            raw = [float(n) for n in sim["per_arm"]]
        else:
            raw = solution.per_arm
        final, steps, extras = adjust.inflate(raw, q)
        base = _base_per_arm(steps, raw)
        power = sim["power"] if sim else _analytic_power(design, q, base, alpha)
        if solution and "events" in solution.extra:
            record["events"] = solution.extra
        record["sample_size"] = {"per_arm": final, "total": sum(final), "steps": pre_steps + steps}
        record["sample_size"].update(extras)
        analysed = base
    else:
        enrolled = list(q["sample_size"]["per_arm"])
        effective, steps = adjust.deflate(enrolled, q)
        record["sample_size"] = {
            "per_arm": enrolled,
            "total": sum(enrolled),
            "steps": pre_steps + steps,
            "analysed_per_arm": effective,
        }
        analysed = effective
        if find == "effect" and simulated:
            # The simulation runs at whole analysed numbers, as for find = power.
            whole = [int(math.floor(n + 1e-9)) for n in effective]
            sim = _simulate(q, alpha, whole, None, executor, progress, cancel, budget)
            record["effect"] = sim["effect"]
            power = sim["power"]
            analysed = whole
        elif find == "effect":
            effect = design.solve_effect(q, effective, alpha)
            record["effect"] = effect
            solved = copy.deepcopy(q)
            solved["effect"][effect["field"]] = effect["value"]
            power = _analytic_power(design, solved, effective, alpha)
        elif simulated:
            whole = [int(math.floor(n + 1e-9)) for n in effective]
            sim = _simulate(q, alpha, whole, None, executor, progress, cancel, budget)
            power = sim["power"]
            analysed = whole
        else:
            power = _analytic_power(design, q, effective, alpha)
    if sim is not None:
        record["type_i_error"] = sim["type_i_error"]
        record["search"] = sim.get("search")
        record["method"] = sim["method"]
        if sim.get("events"):
            record["events"] = {**(record["events"] or {}), "simulated": sim["events"]}
        record["warnings"].extend(sim.get("warnings", []))
        repro = dict(sim["reproducibility"])
        if q["simulation"].get("data") is None:
            # The formula answer beside the simulated one, when both describe the same normal data
            # (for find = effect: the formula's power at the simulated effect).
            basis = q
            if find == "effect":
                basis = copy.deepcopy(q)
                basis["effect"][record["effect"]["field"]] = record["effect"]["value"]
            exact = _analytic_or_none_power(design, basis, analysed, alpha)
            if exact is not None:
                power = dict(power, analytic=exact)
    else:
        record["method"] = design.describe(q)
        repro = {"seed": None, "bit_generator": None, "seed_scheme": None, "chunk_size": None}
    record["power"] = power
    repro["versions"] = versions()
    record["reproducibility"] = repro
    record["warnings"].extend(_warnings(design, q, analysed))
    return record


def _analytic_or_none(design, q, alpha, *, required: bool):
    """The analytic solve; for a simulation it is only a starting point, so failure is tolerated."""
    if required:
        return design.solve_n(q, alpha)
    try:
        return design.solve_n(q, alpha)
    except (EngineError, ValueError, ArithmeticError, KeyError, TypeError):
        return None


def _analytic_or_none_power(design, q, per_arm, alpha):
    try:
        return float(design.power(q, per_arm, alpha))
    except (EngineError, ValueError, ArithmeticError, KeyError, TypeError):
        return None


def _analytic_power(design, q, per_arm, alpha) -> dict:
    return {
        "estimate": float(design.power(q, per_arm, alpha)),
        "mcse": None,
        "ci95": None,
        "replicates": None,
    }


def _base_per_arm(steps: list[dict], raw: list[float]) -> list[int]:
    for step in steps:
        if step.get("step") == "base":
            return list(step["per_arm"])
    return [math.ceil(n - 1e-9) for n in raw]


def _simulate(q, alpha, per_arm, start, executor, progress, cancel, budget) -> dict:
    from . import simulate

    return simulate.answer(
        q,
        alpha,
        per_arm=per_arm,
        start=start,
        executor=executor,
        progress=progress,
        cancel=cancel,
        budget=budget,
    )


def _warnings(design, q, per_arm) -> list[str]:
    notes = []
    if per_arm and min(per_arm) < SMALL_ARM:
        notes.append(
            f"fewer than {SMALL_ARM} analysed per arm ({min(per_arm):g}); large-sample approximations "
            "may be poor and the answer is sensitive to the assumptions"
        )
    if design.warnings_for is not None:
        notes.extend(design.warnings_for(q, per_arm))
    return notes
