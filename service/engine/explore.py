"""What-if views of one question: a sensitivity grid and a robustness panel.

Both re-ask the engine through ``compute`` so every number equals what a single question would
give. The sensitivity grid re-solves a question over a grid of field values (a simulated one
only with the caller's executor, i.e. as a worker job, every cell on the question's seed); the
robustness panel re-simulates a two_means question's power and type I error at a fixed n under
declared departures from normal data. Pure: numpy/scipy/stdlib and ``service.engine`` only.
"""

from __future__ import annotations

import copy
import itertools
import math
from collections.abc import Callable

from scipy import special

from .adjust import alpha_for
from .compute import compute, estimate_cost
from .designs import TESTS
from .errors import BudgetExceeded, QuestionError
from .models import check_arm, moments

MAX_CELLS = 400  # an analytic cell costs milliseconds; bigger grids are a job, not a request
MAX_AXES = 3

# Two-means shortcut: one path that moves both SDs together (a posted "sd" fills both too).
_BOTH_SDS = "effect.sd"

# Paths whose value must stay an integer (the engine reads them as counts).
_INTEGER_PATHS = {
    "adjustments.comparisons",
    "effect.groups",
    "adjustments.cluster.clusters_per_arm",
}


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
    paths = [
        p
        for p in _numeric_paths(q)
        if p.split(".")[0] in ("alpha", "target_power", "allocation_ratio", "effect", "adjustments")
    ]
    if q.get("design") == "two_means":
        paths.append(_BOTH_SDS)
    return paths


def _set_path(q: dict, path: str, value: float) -> None:
    """Set one dotted path in ``q`` (in place); ``effect.sd`` sets both SDs of two_means."""
    if path == _BOTH_SDS and q.get("design") == "two_means":
        q["effect"]["sd_control"] = value
        q["effect"]["sd_treatment"] = value
        return
    *parents, leaf = path.split(".")
    node = q
    for key in parents:
        node = node[key]
    node[leaf] = int(value) if path in _INTEGER_PATHS else value


def _check_values(path: str, values) -> list[float]:
    if not isinstance(values, (list, tuple)) or not values:
        raise QuestionError(f"grid.{path}", f"must be a non-empty list of numbers; got {values!r}")
    out = []
    for i, v in enumerate(values):
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise QuestionError(f"grid.{path}.{i}", f"must be a finite number; got {v!r}")
        if path in _INTEGER_PATHS and float(v) != int(v):
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
        axes.append((path, _check_values(path, values)))
    paths = [p for p, _ in axes]
    if _BOTH_SDS in paths and {"effect.sd_control", "effect.sd_treatment"} & set(paths):
        raise QuestionError(
            "grid.effect.sd",
            "moves both SDs; do not combine it with effect.sd_control/sd_treatment",
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
        q = copy.deepcopy(question)
        for path, v in values.items():
            _set_path(q, path, v)
        cells.append((values, q))
    return axes, cells


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


def grid_cost(question: dict, grid: dict[str, list[float]]) -> int:
    """Return the estimated random draws of the whole grid: the sum of ``estimate_cost`` over cells.

    Examples
    --------
    >>> from service.engine.examples import example_question
    >>> q = example_question(find="power", target_power=None, sample_size={"per_arm": [30, 30]})
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
    grid : dotted field path -> values, e.g. ``{"effect.difference": [0.4, 0.5]}``; for two_means
        ``"effect.sd"`` sets both SDs. At most 3 axes and 400 cells.
    executor, budget : passed to ``compute`` for every cell (chunk fan-out, cost refusal).
    progress : called with the fraction of the grid done, also within a simulated cell.
    base : the question's own result record, when the caller has it (saves one computation).

    Returns
    -------
    dict with ``axes`` (path and values, in grid order), ``cells`` (row-major over the axes, the
    last axis fastest; each with ``values``, ``per_arm``, ``total``, ``power``, ``mcse`` and
    ``error``), ``find``, ``design``, ``method`` and ``base`` (the question's own answer).

    Examples
    --------
    >>> from service.engine.examples import example_question
    >>> q = example_question()  # two means, d = 0.5, SD 1, two-sided 5%, 80% power
    >>> [c["per_arm"] for c in sensitivity(q, {"effect.difference": [0.5, 0.8]})["cells"]]
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
        "design": question["design"],
        "find": question["find"],
        "method": question.get("method", "analytic"),
        "seed": (question.get("simulation") or {}).get("seed"),
        "axes": [{"path": p, "values": v} for p, v in axes],
        "shape": [len(v) for _, v in axes],
        "base": {k: own[k] for k in ("per_arm", "total", "power")},
        "cells": cells,
    }


def _summary(record: dict) -> dict:
    size, power = record["sample_size"], record["power"]
    return {
        "per_arm": list(size["per_arm"]),
        "total": size["total"],
        "power": power["estimate"],
        "mcse": power.get("mcse"),
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
            "per_arm": None,
            "total": None,
            "power": None,
            "mcse": None,
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
# Trials per data model when the question has no replicates of its own (an analytic request).
ROBUSTNESS_REPLICATES = 5000

_FORMULA_TEST = {"student": "student_t", "welch": "welch_t"}
# Two-group designs with a continuous outcome, whose data can depart from the normal.
ROBUSTNESS_DESIGNS = ("two_means", "rank_sum")


def robustness_refusal(design: object) -> str | None:
    """The message refusing a robustness panel for ``design``, or None when it is offered."""
    if design in ROBUSTNESS_DESIGNS:
        return None
    return (
        "the robustness panel simulates departures from the planned data for "
        f"{' and '.join(ROBUSTNESS_DESIGNS)} only; this request's design is {design!r}"
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
    arm = {"family": "lognormal", "mu": mu, "sigma": LOGNORMAL_SIGMA}
    return _with_shift(arm, mean - math.exp(mu + s2 / 2))


def _gamma(mean: float, sd: float) -> dict:
    scale = sd / math.sqrt(GAMMA_SHAPE)
    return _with_shift(
        {"family": "gamma", "shape": GAMMA_SHAPE, "scale": scale}, mean - GAMMA_SHAPE * scale
    )


def _cauchy(mean: float, sd: float) -> dict:
    return {"family": "cauchy", "loc": mean, "scale": _Z75 * sd}


def _with_shift(arm: dict, shift: float) -> dict:
    if shift != 0.0:
        arm["shift"] = shift
    return arm


# name -> (description, arm builder, treatment SD factor)
DEPARTURES: dict[str, tuple[str, object, float]] = {
    "normal": (
        "Normal data with the assumed means and SDs: the reference case the answer was planned for.",
        _normal,
        1.0,
    ),
    "heavy_tails": (
        f"Heavier tails: Student t with {T_DF:g} degrees of freedom in each arm, scaled to the same "
        "mean and SD (more outlying values than the normal).",
        _student_t,
        1.0,
    ),
    "skew_lognormal": (
        f"Right skew: shifted lognormal (log-scale SD {LOGNORMAL_SIGMA:g}, skewness about 2.3) in "
        "each arm, matched to the assumed mean and SD.",
        _lognormal,
        1.0,
    ),
    "skew_gamma": (
        f"Moderate right skew: shifted gamma (shape {GAMMA_SHAPE:g}, skewness about 1.4) in each "
        "arm, matched to the assumed mean and SD.",
        _gamma,
        1.0,
    ),
    "unequal_variance": (
        f"Unequal variance: normal data with the treatment SD multiplied by {SD_FACTOR:g}.",
        _normal,
        SD_FACTOR,
    ),
    "cauchy": (
        "The extreme: Cauchy data (no mean or variance), centred at the assumed means with the "
        "normal model's interquartile range.",
        _cauchy,
        1.0,
    ),
}


def _rank_sum_moments(question: dict) -> tuple[float, float, float, float]:
    """(control mean, difference, sd_c, sd_t) of a rank_sum question's planned data."""
    data = (question.get("simulation") or {}).get("data")
    if isinstance(data, dict) and {"control", "treatment"} <= set(data):
        found = []
        for arm_name in ("control", "treatment"):
            mean, var = moments(check_arm(data[arm_name], f"simulation.data.{arm_name}"))
            if mean is None or var is None or not math.isfinite(var):
                raise QuestionError(
                    f"simulation.data.{arm_name}",
                    "the robustness panel matches each departure to the arm's mean and SD; "
                    f"the {data[arm_name].get('family')!r} arm has none",
                )
            found.append((mean, math.sqrt(var)))
        (m0, s0), (m1, s1) = found
        return m0, m1 - m0, s0, s1
    p = (question.get("effect") or {}).get("prob_superiority")
    if isinstance(p, bool) or not isinstance(p, (int, float)) or not 0 < p < 1:
        raise QuestionError(
            "effect.prob_superiority", f"must be a number in (0, 1) for the panel; got {p!r}"
        )
    # A normal shift with SD 1 gives P(Y > X) = Φ(Δ/√2) (the Noether start uses the same model).
    return 0.0, math.sqrt(2.0) * float(special.ndtri(p)), 1.0, 1.0


def _robustness_iv(question: dict, per_arm) -> tuple[float, float, float, float, list[int]]:
    """Validate the robustness inputs; return (control mean, difference, sd_c, sd_t, per_arm)."""
    design = question.get("design") if isinstance(question, dict) else question
    refusal = robustness_refusal(design)
    if refusal is not None:
        raise QuestionError("design", refusal)
    sizes = _two_sizes(per_arm)
    if design == "rank_sum":
        return (*_rank_sum_moments(question), sizes)
    effect = question.get("effect") or {}
    for name in ("difference", "sd_control", "sd_treatment"):
        value = effect.get(name)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise QuestionError(
                f"effect.{name}", f"must be a number for the robustness panel; got {value!r}"
            )
    sim = question.get("simulation") or {}
    data = sim.get("data")
    # The control mean only positions the skewed families; a posted normal model supplies it.
    mean0 = 0.0
    if isinstance(data, dict) and (data.get("control") or {}).get("family") == "normal":
        mean0 = float(data["control"]["mean"])
    return (
        mean0,
        float(effect["difference"]),
        float(effect["sd_control"]),
        float(effect["sd_treatment"]),
        sizes,
    )


def _two_sizes(per_arm) -> list[int]:
    if not (
        isinstance(per_arm, (list, tuple))
        and len(per_arm) == 2
        and all(isinstance(n, int) and not isinstance(n, bool) and n >= 2 for n in per_arm)
    ):
        raise QuestionError(
            "per_arm", f"must be two whole numbers ≥ 2 (control, treatment); got {per_arm!r}"
        )
    return [int(n) for n in per_arm]


# Effect fields a departure's data model implies; the engine derives them from the arms.
_IMPLIED = frozenset({"difference", "sd", "sd_control", "sd_treatment", "prob_superiority"})


def _departure_questions(
    question: dict, per_arm, *, replicates: int, seed: int
) -> tuple[str, list[tuple[str, str, dict, dict]]]:
    """Validate the inputs; return the test and (name, description, data, question) per departure."""
    if (question.get("adjustments") or {}).get("cluster"):
        raise QuestionError(
            "adjustments.cluster",
            "the robustness panel simulates departures of individual observations; it is not "
            "offered for cluster-randomized questions (ask find = power with method "
            "simulation for the cluster-level check)",
        )
    mean0, diff, sd_c, sd_t, sizes = _robustness_iv(question, per_arm)
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
    design = question["design"]
    test = base_sim.get("test") or _FORMULA_TEST.get(question.get("formula"), TESTS[design][0])
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
    for name, description, data in models:
        q = copy.deepcopy(question)
        q.update(
            find="power",
            target_power=None,
            method="simulation",
            sample_size={"per_arm": list(sizes)},
        )
        # Each departure states the effect its own data model implies (it departs on purpose).
        q["effect"] = {k: v for k, v in (q.get("effect") or {}).items() if k not in _IMPLIED}
        q["simulation"] = {
            "replicates": replicates,
            "seed": seed,
            "test": test,
            "data": data,
            "decision_rule": base_sim.get("decision_rule", "point"),
            "chunk_size": base_sim.get("chunk_size", 1000),
            "search_replicates": base_sim.get("search_replicates", 2000),
        }
        runs.append((name, description, data, q))
    return test, runs


def robustness_cost(question: dict, per_arm: list[int], *, replicates: int, seed: int) -> int:
    """Return the estimated random draws of the robustness panel (sum over the departures)."""
    _test, runs = _departure_questions(question, per_arm, replicates=replicates, seed=seed)
    return sum(int(estimate_cost(q)) for *_rest, q in runs)


def robustness(
    question: dict,
    per_arm: list[int],
    *,
    replicates: int,
    seed: int,
    executor: Callable[[list[dict]], list[dict]] | None = None,
    progress: Callable[[float], None] | None = None,
    budget: int | None = None,
) -> dict:
    """Simulate the chosen test's power and type I error at ``per_arm`` under declared departures.

    Parameters
    ----------
    question : a normalized two_means question (analytic or simulation); its effect gives the
        means and SDs, its simulation test (or the formula's t test) the test.
    per_arm : enrolled n per arm as in the record; dropout and design effect are removed as in
        any power question.
    replicates, seed : Monte Carlo size and seed, the same for every departure (common random
        numbers where the families allow).
    executor, budget : passed to ``compute`` for every departure (chunk fan-out, cost refusal).
    progress : called with the fraction of the departures done.

    Returns
    -------
    dict with ``per_arm``, ``test``, ``replicates``, ``seed`` and ``departures``: one entry per
    departure with ``name``, ``description``, ``data`` (the model simulated), ``power`` and
    ``type_i_error`` (estimate, mcse, ci95, the alpha the test used and the size verdict) and
    the run's ``record_sha256``; ``alpha_per_comparison`` is the level every test used.

    Examples
    --------
    >>> from service.engine.examples import example_question
    >>> q = example_question()  # two means, d = 0.5, SD 1, two-sided 5%, 80% power
    >>> panel = robustness(q, [64, 64], replicates=400, seed=7)
    >>> [d["name"] for d in panel["departures"]][:2]
    ['normal', 'heavy_tails']
    """
    test, runs = _departure_questions(question, per_arm, replicates=replicates, seed=seed)
    departures = []
    for i, (name, description, data, q) in enumerate(runs):
        step = None
        if progress is not None:

            def step(f: float, i: int = i) -> None:
                progress((i + min(max(float(f), 0.0), 1.0)) / len(runs))

        record = compute(q, executor=executor, progress=step, budget=budget)
        analysed = [int(math.floor(n + 1e-9)) for n in record["sample_size"]["analysed_per_arm"]]
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
    sizes = list(runs[0][3]["sample_size"]["per_arm"])
    return {
        "design": question["design"],
        "per_arm": sizes,
        # What the departures simulated: the analysed whole numbers (enrolled less dropout and
        # design effect, rounded down), which differ from ``per_arm`` when adjustments apply.
        "analysed_per_arm": analysed,
        "test": test,
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


def analysis_cost(kind: str, params: dict, question: dict, record: dict | None) -> int:
    """Return the estimated draws of a stored analysis (``kind`` sensitivity or robustness).

    A robustness panel needs the n: from ``record``, else from a find = power question; 0 when
    neither gives it yet (the worker prices it again once the record exists).
    """
    if kind == "sensitivity":
        return grid_cost(question, params["grid"])
    if record is None:
        per_arm = ((question.get("sample_size") or {}).get("per_arm")) or None
        if per_arm is None:
            return 0
    else:
        per_arm = record["sample_size"]["per_arm"]
    return robustness_cost(
        question, list(per_arm), replicates=params["replicates"], seed=params["seed"]
    )
