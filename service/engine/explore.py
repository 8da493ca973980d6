"""What-if views of one question: a sensitivity grid and a robustness panel.

Both re-ask the engine through ``compute`` so every number equals what a single question would
give. The sensitivity grid re-solves a question over a grid of field values (a simulated one
only with the caller's executor, i.e. as a worker job, every cell on the question's seed); the
robustness panel re-simulates a two-group question's power and type I error at a fixed n under
declared departures from its planned data (cells whose model says how: ``planned_moments``). Pure: numpy/scipy/stdlib and ``service.engine`` only.
"""

from __future__ import annotations

import copy
import itertools
import math
from collections.abc import Callable

from . import designs
from .adjust import alpha_for
from .compute import compute, estimate_cost
from .errors import BudgetExceeded, EngineError, QuestionError

MAX_CELLS = 400  # an analytic cell costs milliseconds; bigger grids are a job, not a request
MAX_AXES = 3

# Paths whose value must stay an integer (the engine reads them as counts); the cells' integer
# fields are added from their declarations.
_INTEGER_PATHS = {"adjustments.comparisons", "adjustments.cluster.clusters_per_group"}
_FIELD_BLOCKS = ("effect", "assumptions", "analysis_options")


def _design(q: dict):
    return designs.get(q.get("outcome"), q.get("layout"))


def _integer_paths(q: dict) -> set[str]:
    return _INTEGER_PATHS | {f.path for f in _design(q).fields if f.type == "integer"}


def _single_forms(q: dict) -> dict[str, set[str]]:
    """Declared fields that alone make a form (e.g. ``assumptions.sd``), each with the fields of
    the other forms it replaces: a grid may move such a field though another form was posted."""
    design = _design(q)
    out = {}
    for form in design.forms:
        if len(form) == 1:
            others = {n for f in design.forms if f != form for n in f}
            field = design.field(form[0])
            if field.type in ("number", "integer"):
                out[field.path] = {design.field(n).path for n in others}
    return out


# --- sensitivity grid ---------------------------------------------------------------------


def _numeric_paths(q: dict, prefix: str = "") -> list[str]:
    """Every dotted path in ``q`` that holds a number (not a bool), in a stable order."""
    out: list[str] = []
    for key, value in q.items():
        path = f"{prefix}{key}"
        if isinstance(value, dict):
            out.extend(_numeric_paths(value, path + "."))
        elif isinstance(value, (int, float)) and not isinstance(value, bool):
            out.append(path)
    return out


def _allowed_paths(q: dict) -> list[str]:
    # Fields a grid may move: the assumptions, not the bookkeeping (seeds, replicates, chunking).
    movable = ("alpha", "target_power", "allocation_ratio", *_FIELD_BLOCKS, "adjustments")
    if _estimation(q):  # a precision question moves its interval's half-width and confidence
        movable = (*movable, "hypothesis")
    paths = [p for p in _numeric_paths(q) if p.split(".")[0] in movable]
    return paths + [p for p in _single_forms(q) if p not in paths]


def _estimation(q: dict) -> bool:
    return (q.get("hypothesis") or {}).get("aim") == "estimation"


def _set_path(q: dict, path: str, value: float) -> None:
    """Set one dotted path in ``q`` (in place); a single-field form replaces the other forms'
    fields (``assumptions.sd`` stands for both group SDs)."""
    for other in _single_forms(q).get(path, ()):
        block, name = other.split(".")
        (q.get(block) or {}).pop(name, None)
    *parents, leaf = path.split(".")
    node = q
    for key in parents:
        node = node.setdefault(key, {}) if key in _FIELD_BLOCKS else node[key]
    node[leaf] = int(value) if path in _integer_paths(q) else value


def _check_values(path: str, values, integers: set[str]) -> list[float]:
    if not isinstance(values, (list, tuple)) or not values:
        raise QuestionError(f"grid.{path}", f"must be a non-empty list of numbers; got {values!r}")
    out = []
    for i, v in enumerate(values):
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise QuestionError(f"grid.{path}.{i}", f"must be a finite number; got {v!r}")
        if path in integers and float(v) != int(v):
            raise QuestionError(f"grid.{path}.{i}", f"must be a whole number; got {v!r}")
        out.append(float(v))
    if len(set(out)) != len(out):
        raise QuestionError(f"grid.{path}", f"has repeated values: {values!r}")
    return out


def _check_grid(q: dict, grid) -> list[tuple[str, list[float]]]:
    if not isinstance(grid, dict) or not grid:
        raise QuestionError(
            "grid", f"must be a non-empty mapping of field path to values; got {grid!r}"
        )
    if len(grid) > MAX_AXES:
        raise QuestionError("grid", f"at most {MAX_AXES} axes; got {len(grid)} ({', '.join(grid)})")
    allowed = _allowed_paths(q)
    axes = []
    for path, values in grid.items():
        if path not in allowed:
            raise QuestionError(
                f"grid.{path}",
                f"is not a numeric field of this question; allowed: {', '.join(allowed)}",
            )
        axes.append((path, _check_values(path, values, _integer_paths(q))))
    paths = [p for p, _ in axes]
    for path, replaced in _single_forms(q).items():
        clash = sorted(replaced & set(paths))
        if path in paths and clash:
            raise QuestionError(
                f"grid.{path}", f"replaces {', '.join(clash)}; do not combine them in one grid"
            )
    cells = math.prod(len(v) for _, v in axes)
    if cells > MAX_CELLS:
        raise QuestionError(
            "grid", f"has {cells} cells; at most {MAX_CELLS} are computed in one request"
        )
    return axes


def _cell_questions(
    question: dict, grid
) -> tuple[list[tuple[str, list[float]]], list[tuple[dict, dict]]]:
    """Validate ``grid`` and return its axes and (values, cell question) pairs, row-major."""
    axes = _check_grid(question, grid)
    cells = []
    for combo in itertools.product(*(values for _, values in axes)):
        values = {path: v for (path, _), v in zip(axes, combo, strict=True)}
        cells.append((values, _question_at(question, values)))
    return axes, cells


def _question_at(question: dict, values: dict[str, float]) -> dict:
    """A copy of ``question`` with each dotted path set to its value."""
    q = copy.deepcopy(question)
    for path, v in values.items():
        _set_path(q, path, v)
    return q


def value_questions(question: dict, grid) -> list[tuple[str, int, dict]]:
    """Validate ``grid`` and return, for each listed value alone, (path, index, the question at
    that value): what the validation layer loads to refuse a value the question could not hold."""
    return [
        (path, i, _question_at(question, {path: v}))
        for path, values in _check_grid(question, grid)
        for i, v in enumerate(values)
    ]


def _check_question(question: dict, *, simulated_ok: bool) -> None:
    if not isinstance(question, dict):
        raise QuestionError(
            "question", f"must be a normalized question object; got {type(question).__name__}"
        )
    if question.get("method") == "simulation":
        if not simulated_ok:
            raise QuestionError(
                "method",
                "a sensitivity grid of a simulated question is a long computation and must be "
                "submitted as a worker job (pass an executor)",
            )
        if (question.get("simulation") or {}).get("seed") is None:
            raise QuestionError(
                "simulation.seed", "must be set: every cell of a simulated grid uses the same seed"
            )
    if question.get("find") not in ("sample_size", "power"):
        raise QuestionError(
            "find",
            f"a sensitivity grid needs find 'sample_size' or 'power'; got {question.get('find')!r}",
        )
    if _estimation(question) and question.get("find") != "sample_size":
        raise QuestionError(
            "find", "a sensitivity grid of a precision question needs find 'sample_size'"
        )


def grid_cost(question: dict, grid: dict[str, list[float]]) -> int:
    """Return the estimated random draws of the whole grid: the sum of ``estimate_cost`` over cells.

    Examples
    --------
    >>> from service.engine.examples import example_question
    >>> q = example_question(find="power", target_power=None, sample_size={"per_group": [30, 30]})
    >>> grid_cost(q, {"effect.difference": [0.4, 0.5]})
    0
    """
    _check_question(question, simulated_ok=True)
    _axes, cells = _cell_questions(question, grid)
    return sum(int(estimate_cost(q)) for _values, q in cells)


def sensitivity(
    question: dict,
    grid: dict[str, list[float]],
    *,
    executor: Callable[[list[dict]], list[dict]] | None = None,
    progress: Callable[[float], None] | None = None,
    budget: int | None = None,
    base: dict | None = None,
) -> dict:
    """Re-solve a question at every combination of the grid's field values.

    Parameters
    ----------
    question : a normalized question (DEVELOPERS.md) with ``find`` ``sample_size`` or ``power``;
        analytic, or simulated when ``executor`` is given (every cell keeps the question's seed,
        so a cell's digits depend only on the cell's question).
    grid : dotted field path -> values, e.g. ``{"effect.difference": [0.4, 0.5]}``; a field that
        alone makes a form moves though another form was posted (``"assumptions.sd"`` sets both
        group SDs). At most 3 axes and 400 cells.
    executor, budget : passed to ``compute`` for every cell (chunk fan-out, cost refusal).
    progress : called with the fraction of the grid done, also within a simulated cell.
    base : the question's own result record, when the caller has it (saves one computation).

    Returns
    -------
    dict with ``axes`` (path and values, in grid order), ``cells`` (row-major over the axes, the
    last axis fastest; each with ``values``, ``per_group``, ``total``, ``power``, ``mcse``,
    ``details`` (the record's ``sample_size.details``, None for most cells) and ``error``),
    ``find``, ``outcome``, ``layout``, ``method`` and ``base`` (the question's own answer).

    Examples
    --------
    >>> from service.engine.examples import example_question
    >>> q = example_question()  # two groups, d = 0.5, SD 1, two-sided 5%, 80% power
    >>> [c["per_group"] for c in sensitivity(q, {"effect.difference": [0.5, 0.8]})["cells"]]
    [[64, 64], [26, 26]]
    """
    _check_question(question, simulated_ok=executor is not None)
    axes, pairs = _cell_questions(question, grid)
    hooks = {"executor": executor, "budget": budget}
    own = _summary(base) if base is not None else _cell(question, {}, **hooks)
    if own["error"]:
        raise QuestionError("question", f"the question itself cannot be answered: {own['error']}")
    cells = []
    for i, (values, q) in enumerate(pairs):
        step = None
        if progress is not None:

            def step(f: float, i: int = i) -> None:
                progress((i + min(max(float(f), 0.0), 1.0)) / len(pairs))

        cells.append(_cell(q, values, progress=step, **hooks))
        if progress is not None:
            progress((i + 1) / len(pairs))
    return {
        "outcome": question["outcome"],
        "layout": question["layout"],
        "find": question["find"],
        "method": question.get("method", "analytic"),
        "seed": (question.get("simulation") or {}).get("seed"),
        "axes": [{"path": p, "values": v} for p, v in axes],
        "shape": [len(v) for _, v in axes],
        "base": {k: own[k] for k in ("per_group", "total", "power")},
        "cells": cells,
    }


def _summary(record: dict) -> dict:
    size, power = record["sample_size"], record["power"] or {}  # null: a precision question
    return {
        "per_group": list(size["per_group"]),
        "total": size["total"],
        "power": power.get("estimate"),
        "mcse": power.get("mcse"),
        # the cell's own answer details (a two-stage design's stage rules), as in its record
        "details": size.get("details"),
        "error": None,
    }


def _cell(q: dict, values: dict, **hooks) -> dict:
    # A cell the engine refuses (e.g. a difference of zero) is reported, not fatal to the grid;
    # a cell over the budget is fatal: the whole grid was priced before it started.
    try:
        record = compute(q, **hooks)
    except BudgetExceeded:
        raise
    except QuestionError as exc:
        return {
            "values": values,
            "per_group": None,
            "total": None,
            "power": None,
            "mcse": None,
            "details": None,
            "error": str(exc),
        }
    return {"values": values, **_summary(record)}


# --- robustness panel ---------------------------------------------------------------------

# Lognormal shape parameter: skewness (e^σ² + 2)·√(e^σ² − 1) ≈ 2.26 at σ = 0.6, a clearly skewed
# outcome (lengths of stay, costs) without the extremes of σ ≥ 1.
LOGNORMAL_SIGMA = 0.6
# Gamma shape 2: skewness 2/√2 ≈ 1.41, a moderate right skew.
GAMMA_SHAPE = 2.0
T_DF = 3.0
# Cauchy scale matched to the normal's interquartile range: IQR = 2·scale = 2·z.75·sd.
_Z75 = 0.6744897501960817
SD_FACTOR = 2.0
# Replicates per data model when the question has none of its own (an analytic request).
ROBUSTNESS_REPLICATES = 5000


def robustness_cells() -> list[str]:
    """The cells that offer a robustness panel: their model says the planned data's moments."""
    return [
        d.cell
        for d in designs.all()
        if d.simulation is not None and d.simulation.planned_moments is not None
    ]


def robustness_refusal(question: dict) -> str | None:
    """The message refusing a robustness panel for the question's cell, or None when offered."""
    try:
        design = _design(question)
    except EngineError as exc:
        return str(exc)
    if _estimation(question):
        return (
            "the robustness panel simulates a test's power and type I error; a precision "
            "question (hypothesis.aim estimation) has neither"
        )
    if question.get("interim"):
        # the panel simulates the test of a single final analysis; the sequential test's
        # simulation is not offered yet
        return (
            "the robustness panel simulates a single final analysis; it is not offered for a "
            "question with interim analyses"
        )
    if design.simulation is not None and design.simulation.planned_moments is not None:
        if question.get("analysis") == "ancova":
            # The departures are non-normal outcomes; the baseline-adjusted simulation draws a
            # bivariate normal baseline and outcome only.
            return (
                "the robustness panel simulates non-normal outcomes, which the ancova analysis "
                "is not simulated with; ask it of the pooled_t or welch_t analysis"
            )
        return None
    return (
        "the robustness panel simulates departures from the planned data for "
        f"{' and '.join(robustness_cells())} only; this request's cell is {design.cell}"
    )


def _normal(mean: float, sd: float) -> dict:
    return {"family": "normal", "mean": mean, "sd": sd}


def _student_t(mean: float, sd: float) -> dict:
    # Var of t_df is scale²·df/(df − 2): scale = sd·√((df − 2)/df) keeps the SD.
    return {
        "family": "student_t",
        "df": T_DF,
        "loc": mean,
        "scale": sd * math.sqrt((T_DF - 2) / T_DF),
    }


def _lognormal(mean: float, sd: float) -> dict:
    s2 = LOGNORMAL_SIGMA**2
    # sd² = (e^σ² − 1)·e^(2μ + σ²) fixes μ; the shift then moves the mean into place.
    mu = math.log(sd / math.sqrt(math.expm1(s2))) - s2 / 2
    model = {"family": "lognormal", "mu": mu, "sigma": LOGNORMAL_SIGMA}
    return _with_shift(model, mean - math.exp(mu + s2 / 2))


def _gamma(mean: float, sd: float) -> dict:
    scale = sd / math.sqrt(GAMMA_SHAPE)
    return _with_shift(
        {"family": "gamma", "shape": GAMMA_SHAPE, "scale": scale}, mean - GAMMA_SHAPE * scale
    )


def _cauchy(mean: float, sd: float) -> dict:
    return {"family": "cauchy", "loc": mean, "scale": _Z75 * sd}


def _with_shift(model: dict, shift: float) -> dict:
    if shift != 0.0:
        model["shift"] = shift
    return model


# name -> (description, model builder, treatment SD factor)
DEPARTURES: dict[str, tuple[str, object, float]] = {
    "normal": (
        "Normal data with the assumed means and SDs: the reference case the answer was planned for.",
        _normal,
        1.0,
    ),
    "heavy_tails": (
        f"Heavier tails: Student t with {T_DF:g} degrees of freedom in each group, scaled to the same "
        "mean and SD (more outlying values than the normal).",
        _student_t,
        1.0,
    ),
    "skew_lognormal": (
        f"Right skew: shifted lognormal (log-scale SD {LOGNORMAL_SIGMA:g}, skewness about 2.3) in "
        "each group, matched to the assumed mean and SD.",
        _lognormal,
        1.0,
    ),
    "skew_gamma": (
        f"Moderate right skew: shifted gamma (shape {GAMMA_SHAPE:g}, skewness about 1.4) in each "
        "group, matched to the assumed mean and SD.",
        _gamma,
        1.0,
    ),
    "unequal_variance": (
        f"Unequal variance: normal data with the treatment SD multiplied by {SD_FACTOR:g}.",
        _normal,
        SD_FACTOR,
    ),
    "cauchy": (
        "The extreme: Cauchy data (no mean or variance), centered at the assumed means with the "
        "normal model's interquartile range.",
        _cauchy,
        1.0,
    ),
}


def _robustness_iv(question: dict, per_group) -> tuple[float, float, float, float, list[int]]:
    """Validate the robustness inputs; return (control mean, difference, sd_c, sd_t, sizes)."""
    refusal = robustness_refusal(question)
    if refusal is not None:
        raise QuestionError(
            "analysis" if question.get("analysis") == "ancova" else "layout", refusal
        )
    sizes = _two_sizes(per_group)
    return (*_design(question).simulation.planned_moments(question), sizes)


def _two_sizes(per_group) -> list[int]:
    if not (
        isinstance(per_group, (list, tuple))
        and len(per_group) == 2
        and all(isinstance(n, int) and not isinstance(n, bool) and n >= 2 for n in per_group)
    ):
        raise QuestionError(
            "per_group", f"must be two whole numbers ≥ 2 (control, treatment); got {per_group!r}"
        )
    return [int(n) for n in per_group]


def _departure_questions(
    question: dict, per_group, *, replicates: int, seed: int
) -> tuple[str, list[tuple[str, str, dict, dict]]]:
    """Validate the inputs; return the analysis and (name, description, data, question) per
    departure."""
    if (question.get("adjustments") or {}).get("cluster"):
        raise QuestionError(
            "adjustments.cluster",
            "the robustness panel simulates departures of individual observations; it is not "
            "offered for cluster-randomized questions (ask find = power with method "
            "simulation for the cluster-level check)",
        )
    mean0, diff, sd_c, sd_t, sizes = _robustness_iv(question, per_group)
    if (
        isinstance(replicates, bool)
        or not isinstance(replicates, int)
        or not 200 <= replicates <= 2_000_000
    ):
        raise QuestionError(
            "simulation.replicates", f"must be a whole number in 200…2,000,000; got {replicates!r}"
        )
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed < 2**53:
        raise QuestionError(
            "simulation.seed", f"must be a whole number in [0, 2**53); got {seed!r}"
        )
    base_sim = question.get("simulation") or {}
    design = _design(question)
    analysis = question.get("analysis") or design.default_analysis(question)
    if analysis not in design.analyses_for("simulation"):
        raise QuestionError(
            "analysis",
            f"the robustness panel simulates the planned analysis; '{analysis}' is not "
            f"simulated for {design.cell}",
        )
    planned = base_sim.get("data")
    models = [
        (
            name,
            description,
            {"control": build(mean0, sd_c), "treatment": build(mean0 + diff, sd_t * factor)},
        )
        for name, (description, build, factor) in DEPARTURES.items()
    ]
    if isinstance(planned, dict) and {"control", "treatment"} <= set(planned):
        # A posted data model is the case the answer was planned for; the normal one is matched.
        models.insert(0, ("as_planned", "The data model stated in the question.", planned))
    runs = []
    implied = {f.name for f in design.fields if f.block in ("effect", "assumptions")}
    for name, description, data in models:
        q = copy.deepcopy(question)
        q.update(
            find="power",
            target_power=None,
            method="simulation",
            analysis=analysis,
            sample_size={"per_group": list(sizes)},
        )
        # Each departure states the effect its own data model implies (it departs on purpose).
        for block in ("effect", "assumptions"):
            q[block] = {k: v for k, v in (q.get(block) or {}).items() if k not in implied}
        q["simulation"] = {
            "replicates": replicates,
            "seed": seed,
            "data": data,
            "decision_rule": base_sim.get("decision_rule", "point"),
            "chunk_size": base_sim.get("chunk_size", 1000),
            "search_replicates": base_sim.get("search_replicates", 2000),
        }
        runs.append((name, description, data, q))
    return analysis, runs


def robustness_cost(question: dict, per_group: list[int], *, replicates: int, seed: int) -> int:
    """Return the estimated random draws of the robustness panel (sum over the departures)."""
    _analysis, runs = _departure_questions(question, per_group, replicates=replicates, seed=seed)
    return sum(int(estimate_cost(q)) for *_rest, q in runs)


def robustness(
    question: dict,
    per_group: list[int],
    *,
    replicates: int,
    seed: int,
    executor: Callable[[list[dict]], list[dict]] | None = None,
    progress: Callable[[float], None] | None = None,
    budget: int | None = None,
) -> dict:
    """Simulate the planned analysis's power and type I error at ``per_group`` under departures.

    Parameters
    ----------
    question : a normalized question of a cell that offers the panel (analytic or simulation);
        its effect and assumptions give the means and SDs, its analysis the test.
    per_group : enrolled n per group as in the record; dropout and design effect are removed as
        in any power question.
    replicates, seed : Monte Carlo size and seed, the same for every departure (common random
        numbers where the families allow).
    executor, budget : passed to ``compute`` for every departure (chunk fan-out, cost refusal).
    progress : called with the fraction of the departures done.

    Returns
    -------
    dict with ``per_group``, ``analysis``, ``replicates``, ``seed`` and ``departures``: one per
    departure with ``name``, ``description``, ``data`` (the model simulated), ``power`` and
    ``type_i_error`` (estimate, mcse, ci95, the alpha the test used and the size verdict) and
    the run's ``record_sha256``; ``alpha_per_comparison`` is the level every test used.

    Examples
    --------
    >>> from service.engine.examples import example_question
    >>> q = example_question()  # two groups, d = 0.5, SD 1, two-sided 5%, 80% power
    >>> panel = robustness(q, [64, 64], replicates=400, seed=7)
    >>> [d["name"] for d in panel["departures"]][:2]
    ['normal', 'heavy_tails']
    """
    analysis, runs = _departure_questions(question, per_group, replicates=replicates, seed=seed)
    departures = []
    for i, (name, description, data, q) in enumerate(runs):
        step = None
        if progress is not None:

            def step(f: float, i: int = i) -> None:
                progress((i + min(max(float(f), 0.0), 1.0)) / len(runs))

        record = compute(q, executor=executor, progress=step, budget=budget)
        analyzed = [int(math.floor(n + 1e-9)) for n in record["sample_size"]["analyzed_per_group"]]
        departures.append(
            {
                "name": name,
                "description": description,
                "data": record["method"].get("data", data),
                "power": _estimate(record["power"]),
                "type_i_error": _size(record["type_i_error"]),
                "null_model": (record["type_i_error"] or {}).get("null_model"),
                "record_sha256": record["reproducibility"]["record_sha256"],
            }
        )
    sizes = list(runs[0][3]["sample_size"]["per_group"])
    return {
        "outcome": question["outcome"],
        "layout": question["layout"],
        "per_group": sizes,
        # What the departures simulated: the analyzed whole numbers (enrolled less dropout and
        # design effect, rounded down), which differ from ``per_group`` when adjustments apply.
        "analyzed_per_group": analyzed,
        "analysis": analysis,
        "alpha": question.get("alpha"),
        # The level each simulated test used (per comparison after Bonferroni): the sizes'
        # verdicts are against it.
        "alpha_per_comparison": alpha_for(question)[0],
        "replicates": replicates,
        "seed": seed,
        "departures": departures,
    }


def _estimate(block: dict | None) -> dict | None:
    if block is None:
        return None
    return {k: block.get(k) for k in ("estimate", "mcse", "ci95", "replicates")}


def _size(block: dict | None) -> dict | None:
    """The simulated size with its verdict against the alpha the test used."""
    if block is None:
        return None
    return {**_estimate(block), "alpha": block.get("alpha"), "verdict": block.get("verdict")}


EXPLORATION_TYPES = ("sensitivity_grid", "robustness_panel")


def exploration_cost(
    exploration_type: str, params: dict, question: dict, record: dict | None
) -> int:
    """Return the estimated draws of an exploration (``sensitivity_grid`` or ``robustness_panel``).

    A robustness panel needs the n: from ``record``, else from a find = power question; 0 when
    neither gives it yet (the worker prices it again once the record exists).
    """
    if exploration_type not in EXPLORATION_TYPES:
        raise QuestionError(
            "type", f"must be one of {', '.join(EXPLORATION_TYPES)}; got {exploration_type!r}"
        )
    if exploration_type == "sensitivity_grid":
        return grid_cost(question, params["grid"])
    if record is None:
        per_group = ((question.get("sample_size") or {}).get("per_group")) or None
        if per_group is None:
            return 0
    else:
        per_group = record["sample_size"]["per_group"]
    return robustness_cost(
        question, list(per_group), replicates=params["replicates"], seed=params["seed"]
    )
