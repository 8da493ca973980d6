"""Diagnostic accuracy, controls and cases (diagnostic × two_groups): the AUC against a null
value with the Hanley & McNeil (1982) or the binormal (Obuchowski 1998) standard error,
recomputed with scipy, and the simulated power (binormal scores, Mann–Whitney AUC) against the
analytic power within 4 MCSE."""

from __future__ import annotations

import math

import pytest
from scipy import stats

from service.engine import compute
from service.schemas import QuestionInvalid, load_question

Z = stats.norm.ppf


def roc(**over) -> dict:
    body = {
        "outcome": "diagnostic",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"auc": 0.7},
    }
    body.update(over)
    return body


def answer(body: dict) -> dict:
    return compute(load_question(body))


def hm_var(a: float, controls: int, cases: int) -> float:
    # formula: Hanley & McNeil (1982), Radiology 143:29, the variance of the AUC with Q1 = A/(2 − A),
    # Q2 = 2A²/(1 + A); n_A the cases (abnormal), n_N the controls (normal).
    q1, q2 = a / (2 - a), 2 * a * a / (1 + a)
    return (a * (1 - a) + (cases - 1) * (q1 - a * a) + (controls - 1) * (q2 - a * a)) / (
        cases * controls
    )


def test_power_with_the_hanley_mcneil_standard_errors():
    # formula: power = Φ((A − A₀ − z_{1−α/2}·SE₀)/SE₁) + the far tail (Obuchowski 1998), SEs
    # from Hanley & McNeil (1982) at A₀ = 0.6 and A = 0.8 with 45 controls and 30 cases.
    se0, se1 = math.sqrt(hm_var(0.6, 45, 30)), math.sqrt(hm_var(0.8, 45, 30))
    expected = stats.norm.cdf((0.2 - Z(0.975) * se0) / se1) + stats.norm.cdf(
        (-0.2 - Z(0.975) * se0) / se1
    )
    record = answer(
        roc(
            find="power",
            effect={"auc": 0.8},
            assumptions={"auc_null": 0.6},
            sample_size={"per_group": [45, 30]},
        )
    )
    assert record["power"]["estimate"] == pytest.approx(expected, abs=1e-12)


def test_hanley_mcneil_null_variance_is_the_mann_whitney_variance():
    # formula: at A₀ = 0.5 (Q1 = Q2 = 1/3) Hanley & McNeil's variance is the exact null variance
    # of the Mann–Whitney U / (n_A·n_N): (n_A + n_N + 1)/(12·n_A·n_N) (Mann & Whitney 1947).
    assert hm_var(0.5, 37, 23) == pytest.approx((37 + 23 + 1) / (12 * 37 * 23), rel=1e-12)
    record = answer(roc(find="power", sample_size={"per_group": [37, 23]}))
    se0 = math.sqrt((37 + 23 + 1) / (12 * 37 * 23))
    se1 = math.sqrt(hm_var(0.7, 37, 23))
    expected = stats.norm.cdf((0.2 - Z(0.975) * se0) / se1) + stats.norm.cdf(
        (-0.2 - Z(0.975) * se0) / se1
    )
    assert record["power"]["estimate"] == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize(("a1", "a0", "power"), [(0.8, 0.5, 0.8), (0.85, 0.7, 0.9)])
def test_binormal_sample_size_in_closed_form(a1, a0, power):
    # formula: Obuchowski (1998), Stat Methods Med Res 7:371: with equal numbers (R = 1)
    # V(A) = 0.0099·e^{−a²/2}·(6a² + 16), a = √2·Φ⁻¹(A), and
    # n_cases = (z_{1−α/2}·√V(A₀) + z_{1−β}·√V(A₁))² / (A₁ − A₀)².
    def v(a):
        s = math.sqrt(2) * Z(a)
        return 0.0099 * math.exp(-s * s / 2) * (6 * s * s + 16)

    n = (Z(0.975) * math.sqrt(v(a0)) + Z(power) * math.sqrt(v(a1))) ** 2 / (a1 - a0) ** 2
    record = answer(
        roc(
            analysis="binormal",
            effect={"auc": a1},
            assumptions={"auc_null": a0},
            target_power=power,
        )
    )
    raw = record["sample_size"]["steps"][0]["per_group_raw"]
    # the record's root also counts the far tail, negligible here
    assert raw[1] == pytest.approx(n, rel=1e-6)
    assert record["sample_size"]["per_group"] == [math.ceil(raw[0]), math.ceil(raw[1])]


def test_allocation_ratio_is_cases_per_control():
    record = answer(roc(allocation_ratio=0.5))
    controls, cases = record["sample_size"]["per_group"]
    assert cases == math.ceil(record["sample_size"]["steps"][0]["per_group_raw"][0] * 0.5 - 1e-9)
    assert controls > cases


def test_find_effect_reaches_the_target():
    record = answer(roc(find="effect", effect={}, sample_size={"per_group": [50, 50]}))
    a = record["effect"]["value"]
    assert 0.5 < a < 1
    check = answer(roc(find="power", effect={"auc": a}, sample_size={"per_group": [50, 50]}))
    assert check["power"]["estimate"] == pytest.approx(0.8, abs=1e-6)


def test_bad_input_is_refused_naming_the_field():
    with pytest.raises(QuestionInvalid) as e:
        load_question(roc(effect={"auc": 1.2}))
    assert "effect.auc" in e.value.errors
    with pytest.raises(Exception) as e:
        answer(roc(effect={"auc": 0.5}))
    assert "effect.auc" in str(e.value)


def test_simulated_power_agrees_with_the_analytic_power():
    # Binormal scores, the Mann–Whitney AUC of each replicate and the Hanley–McNeil SE at the
    # null value (exact for A₀ = 0.5); the analytic power uses Hanley–McNeil's SE at A as well.
    record = answer(
        roc(
            find="power",
            sample_size={"per_group": [40, 40]},
            method="simulation",
            simulation={"replicates": 4000, "seed": 20261202},
        )
    )
    power = record["power"]
    assert abs(power["estimate"] - power["analytic"]) < 4 * power["mcse"]
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")
    assert record["method"]["data"]["cases"]["mean"] == pytest.approx(math.sqrt(2) * Z(0.7))
