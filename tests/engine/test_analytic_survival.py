"""Log-rank events (Schoenfeld, Freedman) and subjects from P(event), checked against the published formulas."""

from __future__ import annotations

import math
from functools import partial

import pytest
from scipy import integrate, stats

from service.engine import adjust
from service.engine.designs import get
from service.engine.designs.time_to_event_two_groups import p_event
from service.engine.errors import QuestionError
from tests.engine.questions import make_q as _make_q

DESIGN = get("time_to_event", "two_groups")
make_q = partial(_make_q, "time_to_event", "two_groups")


@pytest.mark.parametrize(
    ("events_formula", "hr", "ratio", "raw", "required"),
    [
        ("schoenfeld", 0.75, 1.0, 379.35, 380),  # formula: Schoenfeld (1983), Biometrics 39:499
        ("schoenfeld", 0.50, 1.0, 65.35, 66),  # formula: Schoenfeld (1983)
        ("schoenfeld", 0.80, 1.0, 630.52, 631),  # formula: Schoenfeld (1983)
        ("freedman", 0.75, 1.0, 384.60, 385),  # formula: Freedman (1982), Stat Med 1:121
        ("freedman", 0.50, 1.0, 70.64, 71),  # formula: Freedman (1982)
        ("schoenfeld", 0.75, 2.0, 426.77, 427),  # formula: Schoenfeld (1983), ÷ 4p(1 − p), p = 1/3
    ],
)
def test_events_reference(events_formula, hr, ratio, raw, required):
    q = make_q(
        effect={"hazard_ratio": hr},
        analysis_options={"events_formula": events_formula},
        allocation_ratio=ratio,
    )
    events = DESIGN.solve_n(q, 0.05).details["events"]
    assert events["raw"] == pytest.approx(raw, abs=0.01)
    assert events["required"] == required


def test_freedman_allocation_formula():
    # formula: Freedman (1982) with treatment:control r, (z+z)²(1 + r·HR)² / (r(1 − HR)²)
    q = make_q(analysis_options={"events_formula": "freedman"}, allocation_ratio=2.0)
    z_sum = stats.norm.ppf(0.975) + stats.norm.ppf(0.8)
    expected = z_sum**2 * (1 + 2 * 0.75) ** 2 / (2 * 0.25**2)
    assert DESIGN.solve_n(q, 0.05).details["events"]["raw"] == pytest.approx(expected, rel=1e-12)


def test_p_event_lachin_foulkes():
    # formula: Lachin & Foulkes (1986), Biometrics 42:507; control median 12, accrual 24, follow-up 12
    assert p_event(math.log(2) / 12, 24, 12) == pytest.approx(0.729495, abs=1e-6)
    assert p_event(math.log(2) / 12 * 0.75, 24, 12) == pytest.approx(0.6303, abs=1e-4)


@pytest.mark.parametrize(
    ("a", "f", "loss"), [(24, 12, 0.0), (24, 12, 0.02), (0, 18, 0.01), (6, 0.5, 0.05)]
)
def test_p_event_against_numerical_integration(a, f, loss):
    # recomputed by scipy.integrate: entry uniform on [0, a], event before loss and before the end
    lam = math.log(2) / 12
    theta = lam + loss

    def seen(time_on_study):
        return lam / theta * (1 - math.exp(-theta * time_on_study))

    if a == 0:
        expected = seen(f)
    else:
        expected = integrate.quad(lambda u: seen(a + f - u), 0, a)[0] / a
    assert p_event(lam, a, f, loss) == pytest.approx(expected, rel=1e-10)


def test_subjects_from_events():
    # formula: events ÷ mean P(event), 380 / mean(.7295, .6303) = 558.91 → 559 total
    q = make_q()
    sol = DESIGN.solve_n(q, 0.05)
    assert sol.details["events"]["probability"]["control"] == pytest.approx(0.7295, abs=1e-4)
    assert sol.details["events"]["probability"]["treatment"] == pytest.approx(0.6303, abs=1e-4)
    assert sum(sol.per_group) == pytest.approx(558.91, abs=0.01)
    assert math.ceil(sum(sol.per_group)) == 559
    # Each arm is rounded up on its own, so the enrolled total is 2 × 280.
    assert adjust.inflate(sol.per_group, q)[0] == [280, 280]


def test_subjects_follow_the_allocation():
    # formula: subjects = events ÷ allocation-weighted mean P(event), split 1:2
    q = make_q(allocation_ratio=2.0)
    sol = DESIGN.solve_n(q, 0.05)
    pc, pt = (
        sol.details["events"]["probability"]["control"],
        sol.details["events"]["probability"]["treatment"],
    )
    assert sol.details["events"]["probability"]["mean"] == pytest.approx((pc + 2 * pt) / 3)
    assert sol.per_group[1] == pytest.approx(2 * sol.per_group[0])
    assert sol.per_group[0] * pc + sol.per_group[1] * pt == pytest.approx(427, rel=1e-12)


@pytest.mark.parametrize("events_formula", ["schoenfeld", "freedman"])
@pytest.mark.parametrize("ratio", [1.0, 2.0])
def test_power_inverts_the_events_formula(events_formula, ratio):
    # formula: power from the expected events; at the raw events it is the target up to the far tail
    q = make_q(analysis_options={"events_formula": events_formula}, allocation_ratio=ratio)
    sol = DESIGN.solve_n(q, 0.05)
    scale = sol.details["events"]["raw"] / sol.details["events"]["required"]
    assert DESIGN.power(q, [n * scale for n in sol.per_group], 0.05) == pytest.approx(0.8, abs=1e-5)
    eff = DESIGN.solve_effect(
        make_q(analysis_options={"events_formula": events_formula}, allocation_ratio=ratio),
        sol.per_group,
        0.05,
    )
    assert eff["field"] == "hazard_ratio" and 0 < eff["value"] < 1
    q2 = make_q(
        effect={"hazard_ratio": eff["value"]},
        analysis_options={"events_formula": events_formula},
        allocation_ratio=ratio,
    )
    assert DESIGN.power(q2, sol.per_group, 0.05) == pytest.approx(0.8, abs=1e-9)


def test_schoenfeld_symmetric_in_log_hazard_ratio():
    # formula: Schoenfeld (1983) depends on ln²HR only, so HR and 1/HR need the same events
    a = DESIGN.solve_n(make_q(effect={"hazard_ratio": 0.75}), 0.05).details["events"]["raw"]
    b = DESIGN.solve_n(make_q(effect={"hazard_ratio": 1 / 0.75}), 0.05).details["events"]["raw"]
    assert a == pytest.approx(b, rel=1e-12)


def test_warnings_for_few_events():
    # common practice, no source: the log-rank approximation wants a fair number of events
    assert DESIGN.warnings_for(make_q(effect={"hazard_ratio": 0.3}), [20, 20])
    assert DESIGN.warnings_for(make_q(), [280, 280]) == []


@pytest.mark.parametrize(
    ("blocks", "field"),
    [
        ({"effect": {"hazard_ratio": 1.0}}, "effect.hazard_ratio"),
        ({"assumptions": {"control_hazard": 0.0}}, "assumptions.control_hazard"),
        ({"assumptions": {"accrual": 0.0, "follow_up": 0.0}}, "assumptions.follow_up"),
        ({"assumptions": {"loss_hazard": -0.1}}, "assumptions.loss_hazard"),
    ],
)
def test_bad_input_names_the_field(blocks, field):
    # common practice, no source: errors name the field and echo the value
    with pytest.raises(QuestionError) as err:
        DESIGN.solve_n(make_q(**blocks), 0.05)
    assert err.value.field == field


def test_describe_names_both_references():
    # common practice, no source
    assert "Schoenfeld" in DESIGN.describe(make_q())["reference"]
    assert (
        "Freedman"
        in DESIGN.describe(make_q(analysis_options={"events_formula": "freedman"}))["reference"]
    )
