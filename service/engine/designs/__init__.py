"""The design registry: one module per design family, each exposing the same small surface.

Every design module defines a module-level ``DESIGN = Design(...)`` (or several) and the
registry below maps the public design name to it. A design's analytic functions receive the
*normalized* question ``q`` (see DEVELOPERS.md, "The question") and the alpha already split
for multiple comparisons; they never round, the adjustment steps do.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field


@dataclass(frozen=True)
class Solution:
    """An analytic solve: raw (unrounded) n per arm and design-specific extras (e.g. events)."""

    per_arm: list[float]
    extra: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Design:
    """What the engine knows about one design family.

    Attributes
    ----------
    name : public design name used in questions.
    formulas : analytic formulas offered, the first is the default; empty when none.
    tests : simulation tests offered, the first is the default.
    arms : q -> number of arms (1 for one-sample, paired and correlation designs).
    allocation : q -> relative arm sizes, control (or first group) first, e.g. [1, r].
    solve_n : (q, alpha) -> Solution at q["target_power"].
    power : (q, per_arm, alpha) -> analytic power at the given (possibly fractional) n per arm.
    solve_effect : (q, per_arm, alpha) -> {"field": name, "value": x} reaching target power.
    describe : q -> the ``method`` block of an analytic record (formula name and reference).
    warnings_for : optional (q, per_arm) -> list of plain-language warnings (approximation limits).
    """

    name: str
    formulas: tuple[str, ...]
    tests: tuple[str, ...]
    arms: Callable[[dict], int]
    allocation: Callable[[dict], list[float]]
    solve_n: Callable[[dict, float], Solution]
    power: Callable[[dict, list[float], float], float]
    solve_effect: Callable[[dict, list[float], float], dict]
    describe: Callable[[dict], dict]
    warnings_for: Callable[[dict, list[float]], list[str]] | None = None


def _registry() -> dict[str, Design]:
    from . import anova, correlation, one_mean, proportions, rank_sum, survival, two_means

    designs = [
        two_means.DESIGN,
        one_mean.PAIRED,
        one_mean.DESIGN,
        proportions.DESIGN,
        anova.DESIGN,
        correlation.DESIGN,
        rank_sum.DESIGN,
        survival.DESIGN,
    ]
    return {d.name: d for d in designs}


DESIGN_NAMES = (
    "two_means",
    "paired_mean",
    "one_mean",
    "two_proportions",
    "anova_oneway",
    "correlation",
    "rank_sum",
    "survival_logrank",
)

# Simulation tests per design, the first is the default. Kept here (not only in the modules)
# so the catalogue and the schemas can list them without importing the numerics.
TESTS = {
    "two_means": ("student_t", "welch_t", "rank_sum"),
    "paired_mean": ("student_t", "signed_rank"),
    "one_mean": ("student_t", "signed_rank"),
    "two_proportions": ("z_test", "fisher_exact"),
    "anova_oneway": ("f_test", "kruskal_wallis"),
    "correlation": ("pearson",),
    "rank_sum": ("rank_sum",),
    "survival_logrank": ("logrank",),
}

FORMULAS = {
    "two_means": ("student", "welch"),
    "paired_mean": ("noncentral_t",),
    "one_mean": ("noncentral_t",),
    "two_proportions": ("pooled_z", "unpooled_z", "arcsine", "farrington_manning"),
    "anova_oneway": ("noncentral_f",),
    "correlation": ("fisher_z",),
    "rank_sum": ("noether",),
    "survival_logrank": ("schoenfeld", "freedman"),
}

_CACHE: dict[str, Design] = {}


def get(name: str, layout: str | None = None) -> Design:
    """Return the design called ``name``; KeyError when there is none."""
    if layout is not None:
        return _NEW[(name, layout)]
    if not _CACHE:
        _CACHE.update(_registry())
    return _CACHE[name]


# PROVISIONAL (schema helper): the new registry per VOCAB §8 until the engine's lands.
_NEW: dict[tuple[str, str], object] = {}


def register(design) -> None:
    """Register a design (outcome × layout)."""
    _NEW[(design.outcome, design.layout)] = design


def all() -> tuple:  # noqa: A001
    """Every registered design."""
    return tuple(_NEW.values())
