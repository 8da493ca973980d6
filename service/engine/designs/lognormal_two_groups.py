"""Log-normal outcome, two parallel groups: the ratio of geometric means, treatment over control,
by Student's t on the log scale with N − 2 degrees of freedom. Against a margin this is average
bioequivalence in a parallel design: two one-sided tests with exact power by Owen's Q (Phillips
1990). The total CV (between and within subjects together) sets the log-scale SD,
σ² = ln(1 + CV²); the margin is on the log scale as in the crossover cell.
"""

from __future__ import annotations

import math

from ..quantiles import t_power
from . import continuous_two_groups as parallel
from . import lognormal_crossover as ratio_cell
from .base import TESTING_AIMS, Analysis, Design, Phrases, SimulationModel
from .common import (
    analysis_of,
    analytic_method,
    fmt,
    hypothesis,
    make_validate,
    no_warnings,
    number,
    tails,
    two_group_allocation,
    two_groups,
    values,
)

FIELDS = (
    ratio_cell.RATIO,
    ratio_cell.cv_field(
        "Total coefficient of variation of the exposure between subjects (e.g. 0.4 for 40 %).",
        "coefficient of variation",
    ),
)
FORMS = (("cv",),)
ANALYSES = (
    Analysis(
        "pooled_t",
        "Student's t test on the log scale (two one-sided tests against limits)",
        ("analytic", "simulation"),
        TESTING_AIMS,
        "Schuirmann 1987; Phillips 1990 (exact power by Owen's Q)",
    ),
)
validate = make_validate(FIELDS, FORMS, "ratio")


def _sd(q: dict) -> float:
    return ratio_cell.log_sd(number(q, FIELDS, "cv"))


def _power(q: dict, delta: float, n1: float, n2: float, alpha: float) -> float:
    analysis_of(q, DESIGN, "analytic")
    aim, margin, higher = hypothesis(q)
    se = _sd(q) * math.sqrt(1.0 / n1 + 1.0 / n2)
    df = n1 + n2 - 2.0
    if aim == "superiority":
        return t_power(abs(delta) / se, df, alpha, tails(q))
    if aim == "noninferiority":
        return t_power((1.0 if higher else -1.0) * (delta - margin) / se, df, alpha, 1)
    return parallel.tost_power(delta, se, margin, df, alpha)


def solve_n(q: dict, alpha: float):
    delta = ratio_cell.log_ratio(q, FIELDS)
    ratio_cell.check(q, delta)
    return ratio_cell.crossover.solve_sizes(
        lambda n1, n2: _power(q, delta, n1, n2, alpha),
        q,
        "effect.ratio",
        number(q, FIELDS, "ratio"),
    )


def power(q: dict, per_group: list[float], alpha: float) -> float:
    delta = ratio_cell.log_ratio(q, FIELDS)
    if not (delta == 0 and hypothesis(q)[0] == "superiority"):
        ratio_cell.check(q, delta)
    return _power(q, delta, float(per_group[0]), float(per_group[1]), alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    n1, n2 = float(per_group[0]), float(per_group[1])
    scale = _sd(q) * math.sqrt(1.0 / n1 + 1.0 / n2)
    return ratio_cell.solve_ratio(q, lambda d: _power(q, d, n1, n2, alpha), per_group, scale)


def derive(q: dict) -> dict:
    v = values(q, FIELDS)
    out: dict = {}
    if v.get("cv") is not None:
        out["sd_log"] = _sd(q)
    if v.get("ratio") is not None:
        out["log_ratio"] = math.log(float(v["ratio"]))
    return out


def describe(q: dict) -> dict:
    analysis = analysis_of(q, DESIGN, "analytic")
    notes = [
        "Analysis on the log scale: σ² = ln(1 + CV²) from the total CV; SE = σ·√(1/n₁ + 1/n₂), "
        "n₁ + n₂ − 2 degrees of freedom."
    ]
    note = ratio_cell.limits_note(q)
    if note:
        notes.append(note)
    if hypothesis(q)[0] == "equivalence":
        name = "two one-sided tests (TOST) on the log scale, exact power by Owen's Q"
    else:
        name = "noncentral t on the log scale, pooled variance, exact"
    ref = "Phillips (1990), J Pharmacokinet Biopharm 18:137; Schuirmann (1987)"
    return analytic_method(analysis, DESIGN.analysis(analysis).label, name, ref, notes, derive(q))


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=lambda q: ratio_cell.log_models(ratio_cell.log_ratio(q, FIELDS), _sd(q)),
    null_data=parallel.null_data,
    kernels={"pooled_t": "t_pooled"},
    effect_axis=ratio_cell.ratio_axis,
    data_block=lambda arms, labels, extra: {
        "scale": "log",
        "control": dict(arms[0]),
        "treatment": dict(arms[1]),
    },
    implied_contrast=parallel.implied_contrast,
)


DESIGN = Design(
    outcome="lognormal",
    layout="two_groups",
    label="Log-normal outcome (ratio of geometric means), two groups",
    fields=FIELDS,
    forms=FORMS,
    solved="ratio",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "pooled_t",
    groups=two_groups,
    allocation=two_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(
        effect=lambda q, record: ratio_cell.ratio_sentence(q, record, FIELDS, "control"),
        assumptions=lambda q: (
            f"a coefficient of variation of {fmt(values(q, FIELDS)['cv'])}"
            if values(q, FIELDS).get("cv") is not None
            else ""
        ),
        margin=ratio_cell.margin_words,
    ),
    example="northbridge_bioequivalence_parallel.json",
    contrast=ratio_cell.DESIGN.contrast,
    null_effect=lambda q: 1.0,
    equivalence_alpha=ratio_cell.BIOEQUIVALENCE_ALPHA,
    equivalence_alpha_source=ratio_cell.BIOEQUIVALENCE_ALPHA_SOURCE,
    notes=ratio_cell.DESIGN.notes,
)
