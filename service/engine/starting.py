"""Analytic answers used as helpers of a simulation: the search's starting point and the formula
power printed beside a simulated one. Either may be unavailable for a question the simulation
can still answer (an analysis with no formula, an effect the formula refuses, numerics failing
at an extreme); only those expected failures give None, anything else is a defect and raises.
"""

from __future__ import annotations

from .designs.base import Design, Solution
from .designs.common import analysis_of
from .errors import EngineError

# What an analytic helper may fail with on a question the simulation answers: the design's own
# refusal (EngineError), and numerics at an extreme (overflow, a root not bracketed).
EXPECTED = (EngineError, ArithmeticError, ValueError)


def analytic_basis(design: Design, q: dict) -> dict | None:
    """The question with an analysis the analytic method honors: its own when it has a formula,
    else the cell's first analytic analysis for the aim; None when the cell has none."""
    try:
        analysis_of(q, design, "analytic")
        return q
    except EngineError:
        pass
    aim = (q.get("hypothesis") or {}).get("aim", "superiority")
    offered = design.analyses_for("analytic", aim)
    if not offered:
        return None
    return dict(q, analysis=offered[0])


def analytic_solution(design: Design, q: dict, alpha: float) -> Solution | None:
    """The analytic solve (raw n per group and details), or None when the formula cannot answer."""
    basis = analytic_basis(design, q)
    if basis is None:
        return None
    try:
        return design.solve_n(basis, alpha)
    except EXPECTED:
        return None


def analytic_n(design: Design, q: dict, alpha: float) -> list[float] | None:
    """The analytic raw n per group, or None when the formula cannot answer."""
    solution = analytic_solution(design, q, alpha)
    return None if solution is None else solution.per_group


def analytic_power(design: Design, q: dict, per_group: list[float], alpha: float) -> float | None:
    """The analytic power at the given sizes, or None when the formula cannot answer."""
    basis = analytic_basis(design, q)
    if basis is None:
        return None
    try:
        return float(design.power(basis, per_group, alpha))
    except EXPECTED:
        return None


def analytic_effect(design: Design, q: dict, per_group: list[float], alpha: float) -> float | None:
    """The analytic effect at the given sizes, or None when the formula cannot answer."""
    basis = analytic_basis(design, q)
    if basis is None:
        return None
    try:
        return float(design.solve_effect(basis, per_group, alpha)["value"])
    except EXPECTED:
        return None
