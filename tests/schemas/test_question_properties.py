"""Property: any JSON-ish input either loads or raises QuestionInvalid keyed by dotted paths."""

from __future__ import annotations

import re

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.engine import designs
from service.schemas import QuestionInvalid, load_question

OUTCOMES = sorted({d.outcome for d in designs.all()})
LAYOUTS = sorted({d.layout for d in designs.all()})
ANALYSES = sorted({a.name for d in designs.all() for a in d.analyses})
PATH = re.compile(r"^[A-Za-z0-9_]+(\.[A-Za-z0-9_]+)*$")

leaves = (
    st.none()
    | st.booleans()
    | st.integers(min_value=-(2**60), max_value=2**60)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.sampled_from([0, 1, 2, 0.5, 0.05, 0.8, -1, 1e300, 2**53, "0.05", ""])
    | st.text(max_size=8)
)
json_values = st.recursive(
    leaves,
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=4)
    ),
    max_leaves=12,
)
# Every declared field name of every cell, posted into any block.
FIELD_KEYS = sorted({f.name for d in designs.all() for f in d.fields})
DIST_KEYS = [
    "family",
    "mean",
    "sd",
    "p",
    "shape",
    "scale",
    "low",
    "high",
    "df",
    "loc",
    "mu",
    "sigma",
]
families = st.sampled_from(["normal", "bernoulli", "weibull", "uniform", "exponential", "x"])
dist = st.dictionaries(st.sampled_from(DIST_KEYS), json_values | families, max_size=4)
data_model = st.dictionaries(
    st.sampled_from(["control", "treatment", "group", "differences", "groups"]),
    dist | st.lists(dist, max_size=3) | json_values,
    max_size=3,
)
blocks = (
    st.dictionaries(
        st.sampled_from(FIELD_KEYS),
        st.floats(-2, 30) | st.sampled_from(["months", "schoenfeld", True]) | json_values,
        max_size=5,
    )
    | json_values
)
questions = st.fixed_dictionaries(
    {},
    optional={
        "outcome": st.sampled_from([*OUTCOMES, "other"]) | json_values,
        "layout": st.sampled_from([*LAYOUTS, "other"]) | json_values,
        "analysis": st.sampled_from(ANALYSES) | json_values,
        "find": st.sampled_from(["sample_size", "power", "effect"]) | json_values,
        "alpha": json_values,
        "alternative": st.sampled_from(["two-sided", "one-sided"]) | json_values,
        "target_power": json_values,
        "sample_size": st.dictionaries(
            st.sampled_from(["per_group", "total"]),
            st.lists(st.integers(-2, 200), max_size=4) | st.integers(-5, 500) | json_values,
            max_size=2,
        ),
        "allocation_ratio": json_values,
        "effect": blocks,
        "assumptions": blocks,
        "analysis_options": blocks,
        "hypothesis": st.dictionaries(
            st.sampled_from(["aim", "margin", "higher_is_better"]),
            st.sampled_from(["superiority", "noninferiority", "equivalence"]) | json_values,
            max_size=3,
        ),
        "adjustments": st.dictionaries(
            st.sampled_from(["dropout", "cluster", "comparisons"]), json_values, max_size=3
        ),
        "method": st.sampled_from(["analytic", "simulation"]) | json_values,
        "simulation": st.dictionaries(
            st.sampled_from(["replicates", "seed", "data", "decision_rule"]),
            json_values | data_model,
            max_size=4,
        ),
        "extra": json_values,
    },
)


def _odd_keys(value) -> set[str]:
    """The posted keys, at any depth, that are not plain names."""
    if isinstance(value, dict):
        own = {k for k in value if not PATH.match(k) or "." in k}
        return own.union(*(_odd_keys(v) for v in value.values()))
    if isinstance(value, list):
        return set().union(*(_odd_keys(v) for v in value))
    return set()


def _ends_in(path: str, key: str) -> bool:
    """``path`` is ``key`` itself, or a plain dotted path followed by ``.key``."""
    return path == key or (path.endswith("." + key) and bool(PATH.match(path[: -len(key) - 1])))


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(questions)
def test_loads_or_raises_question_invalid(raw: dict) -> None:
    try:
        q = load_question(raw)
    except QuestionInvalid as exc:
        assert exc.errors
        odd = _odd_keys(raw)
        for path, messages in exc.errors.items():
            # A key that is not a plain name is reported at its own path, below a plain one.
            assert PATH.match(path) or any(_ends_in(path, key) for key in odd), path
            assert messages and all(isinstance(m, str) and m for m in messages)
        return
    assert (q["outcome"], q["layout"]) in {(d.outcome, d.layout) for d in designs.all()}
    assert load_question(q) == q  # the normalized form is a fixed point


@settings(max_examples=150, deadline=None)
@given(json_values)
def test_any_json_value_is_handled(raw) -> None:
    try:
        load_question(raw)
    except QuestionInvalid as exc:
        odd = _odd_keys(raw)
        assert all(PATH.match(p) or any(_ends_in(p, k) for k in odd) for p in exc.errors)


finite = st.floats(-50, 50, allow_nan=False)
positive = st.floats(0.01, 50)
unit = st.floats(0.01, 0.99)
TWO = {"outcome": "continuous", "layout": "two_groups"}
near_valid = st.one_of(
    st.builds(
        lambda d, sc, st_, a: {
            **TWO,
            "alpha": a,
            "effect": {"difference": d},
            "assumptions": {"sd_control": sc, "sd_treatment": st_},
        },
        finite,
        positive,
        positive,
        st.floats(0.001, 0.5),
    ),
    st.builds(
        lambda pc, pt, cc: {
            "outcome": "binary",
            "layout": "two_groups",
            "effect": {"p_treatment": pt},
            "assumptions": {"p_control": pc},
            "analysis_options": {"continuity_correction": cc},
        },
        unit,
        unit,
        st.booleans(),
    ),
    st.builds(
        lambda means, sd, n: {
            "outcome": "continuous",
            "layout": "k_groups",
            "find": "power",
            "sample_size": {"total": n},
            "effect": {"group_means": means},
            "assumptions": {"sd": sd},
        },
        st.lists(finite, min_size=2, max_size=6),
        positive,
        st.integers(12, 5000),
    ),
    st.builds(
        lambda hr, m, a, f, r, unit_: {
            "outcome": "time_to_event",
            "layout": "two_groups",
            "allocation_ratio": r,
            "find": "power",
            "sample_size": {"total": 400},
            "effect": {"hazard_ratio": hr},
            "assumptions": {
                "time_unit": unit_,
                "control_median": m,
                "accrual": a,
                "follow_up": f,
            },
        },
        positive,
        positive,
        positive,
        st.floats(0, 50),
        st.floats(0.2, 5),
        st.sampled_from(["days", "weeks", "months", "years"]),
    ),
)


@settings(max_examples=200, deadline=None)
@given(near_valid)
def test_in_range_questions_load_and_are_fixed_points(raw: dict) -> None:
    try:
        q = load_question(raw)
    except QuestionInvalid as exc:
        # the only refusals left for in-range numbers are "no effect to detect" when solving n
        assert all("must differ from" in m for ms in exc.errors.values() for m in ms), exc.errors
        return
    assert load_question(q) == q
    if q["sample_size"] is not None and "total" in raw.get("sample_size", {}):
        assert sum(q["sample_size"]["per_group"]) == raw["sample_size"]["total"]
