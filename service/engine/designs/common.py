"""What the design modules share: the offered-formula and hypothesis checks, effect field checks,
arm layouts, the analytic method block, and the ``Design`` assembled from a module's functions.
"""

from __future__ import annotations

from ..errors import QuestionError
from ..quantiles import effect_value
from . import FORMULAS, TESTS, Design

# The functions every design module defines (``warnings_for`` is optional).
_SURFACE = ("arms", "allocation", "solve_n", "power", "solve_effect", "describe")


def check_formula(q: dict, design: str, formulas: tuple[str, ...] | None = None) -> str:
    """Return the question's formula (the first offered when unset), refusing one not offered."""
    offered = FORMULAS[design] if formulas is None else formulas
    formula = q.get("formula") or offered[0]
    if formula not in offered:
        raise QuestionError(
            "formula", f"'{formula}' is not offered for {design}; use one of {list(offered)}"
        )
    return formula


def hypothesis(q: dict) -> tuple[str, float | None, bool]:
    """Return (kind, margin, higher_is_better) with the defaults of a superiority question."""
    h = q.get("hypothesis") or {}
    return h.get("kind", "superiority"), h.get("margin"), bool(h.get("higher_is_better", True))


def check_superiority(q: dict, design: str) -> None:
    """Refuse a non-inferiority or equivalence question for a design that offers neither."""
    kind = hypothesis(q)[0]
    if kind != "superiority":
        raise QuestionError(
            "hypothesis.kind", f"'{kind}' is not offered for {design}; only superiority"
        )


def sides(q: dict) -> int:
    """Return the number of tails of the test (2 unless the question says otherwise)."""
    return int(q.get("sides", 2))


def positive_effect(q: dict, name: str) -> float:
    """Return ``q["effect"][name]``, checked to be greater than 0."""
    value = effect_value(q, name)
    if not value > 0:
        raise QuestionError(f"effect.{name}", f"must be greater than 0; got {value:g}")
    return value


def effect_between(
    q: dict, name: str, lo: float, hi: float, *, default: float | None = None
) -> float:
    """Return ``q["effect"][name]`` (or ``default`` when unset), checked to lie in (lo, hi)."""
    value = effect_value(q, name, default)
    if not lo < value < hi:
        raise QuestionError(
            f"effect.{name}", f"must be strictly between {lo:g} and {hi:g}; got {value:g}"
        )
    return value


def one_arm(q: dict) -> int:
    """Return the number of arms of a one-sample design (one)."""
    return 1


def one_arm_allocation(q: dict) -> list[float]:
    """Return the relative arm sizes of a one-sample design ([1])."""
    return [1.0]


def two_arms(q: dict) -> int:
    """Return the number of arms of a two-arm design (two)."""
    return 2


def two_arm_allocation(q: dict) -> list[float]:
    """Return the relative arm sizes [control, treatment] from the allocation ratio."""
    return [1.0, float(q.get("allocation_ratio") or 1.0)]


def analytic_method(formula: str, reference: str, notes: list[str]) -> dict:
    """Return the ``method`` block of an analytic record."""
    return {"kind": "analytic", "formula": formula, "reference": reference, "notes": notes}


def design_from(name: str, functions: dict, *, formulas: tuple[str, ...] | None = None) -> Design:
    """Return the Design called ``name`` built from the surface functions in ``functions``."""
    return Design(
        name=name,
        formulas=FORMULAS[name] if formulas is None else formulas,
        tests=TESTS[name],
        **{key: functions[key] for key in _SURFACE},
        warnings_for=functions.get("warnings_for"),
    )
