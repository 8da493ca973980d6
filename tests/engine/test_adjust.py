"""Adjustment steps: Bonferroni, rounding, dropout, and the reverse for power (clusters: test_cluster)."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.engine import adjust
from tests.engine.questions import make_q


@pytest.mark.parametrize(
    ("n", "rate", "expected"),
    [
        (64, 0.20, 80),  # common practice, no source: n/(1 − q); n·(1 + q) = 77 keeps only 61.6
        (63, 0.15, 75),  # common practice, no source: 63/0.85 = 74.12 → 75
    ],
)
def test_dropout_divides_by_retention(n, rate, expected):
    final, steps = adjust.inflate(
        [float(n)], make_q("continuous", "two_groups", adjustments={"dropout": rate})
    )
    assert final == [expected]
    assert steps[-1] == {"step": "dropout", "rate": rate, "per_group": [expected]}
    assert final[0] * (1 - rate) >= n


def test_steps_are_ordered_base_dropout():
    # common practice, no source: rounding to whole subjects first, dropout last
    final, steps = adjust.inflate(
        [124.3], make_q("continuous", "two_groups", adjustments={"dropout": 0.2})
    )
    assert [s["step"] for s in steps] == ["base", "dropout"]
    assert final == [157]  # 125 / 0.8 = 156.25 → 157


def test_ceiling_ignores_floating_noise():
    # common practice, no source: 64.0000000001 from floating error is 64, 64.01 is 65
    assert adjust.inflate([64.0000000001, 64.01], make_q("continuous", "two_groups"))[0] == [64, 65]


def test_bonferroni():
    # formula: Bonferroni, alpha / k
    assert adjust.alpha_for(make_q("continuous", "two_groups")) == (0.05, None)
    alpha, step = adjust.alpha_for(
        make_q("continuous", "two_groups", adjustments={"comparisons": 4})
    )
    assert alpha == pytest.approx(0.0125)
    assert step == {
        "step": "bonferroni",
        "comparisons": 4,
        "alpha": 0.05,
        "alpha_per_comparison": pytest.approx(0.0125),
    }


def test_deflate_reverses_inflate():
    # common practice, no source: 80 enrolled with 20% dropout leave 64 analysable
    effective, steps = adjust.deflate(
        [80, 80], make_q("continuous", "two_groups", adjustments={"dropout": 0.2})
    )
    assert effective == pytest.approx([64.0, 64.0])
    assert [s["step"] for s in steps] == ["enrolled", "dropout"]


def test_deflate_without_adjustments_is_identity():
    # common practice, no source
    effective, steps = adjust.deflate([30, 45], make_q("continuous", "two_groups"))
    assert effective == [30.0, 45.0] and steps == [{"step": "enrolled", "per_group": [30, 45]}]


@pytest.mark.parametrize(
    ("total", "allocation", "expected"),
    [
        (100, [1, 2], [33, 67]),  # largest remainder: 33.33 / 66.67
        (7, [1, 1], [4, 3]),  # tie goes to the first (control) arm
        (10, [1, 1, 1], [4, 3, 3]),
        (138, [1, 1], [69, 69]),
    ],
)
def test_split_total(total, allocation, expected):
    # common practice, no source: largest-remainder (Hamilton) apportionment
    assert adjust.split_total(total, allocation) == expected


@given(st.integers(2, 10_000), st.lists(st.floats(0.1, 10.0), min_size=1, max_size=6))
def test_split_total_sums_and_stays_within_one(total, allocation):
    # common practice, no source: parts sum to the total and each is within 1 of its quota
    parts = adjust.split_total(total, allocation)
    assert sum(parts) == total
    s = sum(allocation)
    assert all(abs(p - total * a / s) < 1 for p, a in zip(parts, allocation, strict=True))
