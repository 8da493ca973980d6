"""2×2 crossover (continuous × crossover) and average bioequivalence on the log scale
(lognormal × crossover, lognormal × two_groups): published and library reference values, then
simulated power against the exact power within 4 MCSE."""

from __future__ import annotations

import copy
import math

import pytest
from statsmodels.stats.power import TTestIndPower

from service.engine import compute
from service.schemas import QuestionInvalid, load_question

LN125 = math.log(1.25)
BE = {"aim": "equivalence", "margin": LN125}


def crossover(**over) -> dict:
    body = {
        "outcome": "continuous",
        "layout": "crossover",
        "find": "sample_size",
        "effect": {"difference": 0.5},
        "assumptions": {"sd_within": 1.0},
    }
    body.update(over)
    return body


def bioequivalence(layout="crossover", cv=0.25, ratio=0.95, **over) -> dict:
    body = {
        "outcome": "lognormal",
        "layout": layout,
        "find": "sample_size",
        "alpha": 0.05,
        "target_power": 0.8,
        "alternative": "one-sided",
        "effect": {"ratio": ratio},
        "assumptions": {"cv": cv},
        "hypothesis": BE,
    }
    body.update(over)
    if body["find"] == "power":
        body.pop("target_power")
    return body


def answer(body: dict) -> dict:
    return compute(load_question(body))


# --- reference values -----------------------------------------------------------------------


def test_bioequivalence_crossover_cv25_gmr095_needs_28():
    # published: Diletti, Hauschke & Steinijans (1991), Int J Clin Pharmacol Ther Toxicol 29:1,
    # table for limits 0.80–1.25, alpha .05, power .80: CV 25 %, ratio 0.95 -> N = 28 in total
    # (recomputed exactly: σ_w² = ln(1 + CV²), se = σ_w·√(2/N), df = N − 2); the power 0.8074
    # at N = 28 is this method's output (formula), not a printed number.
    record = answer(bioequivalence())
    assert record["sample_size"]["total"] == 28
    assert record["sample_size"]["per_group"] == [14, 14]
    assert record["power"]["estimate"] == pytest.approx(0.8074, abs=5e-5)
    assert "Owen" in record["method"]["approximation"]
    assert record["method"]["derived"]["sd_within_log"] == pytest.approx(
        math.sqrt(math.log(1 + 0.25**2))
    )


@pytest.mark.parametrize(
    ("cv", "total", "power"),
    [(0.10, 8, 0.9155), (0.15, 12, 0.8305), (0.20, 20, 0.8347), (0.30, 40, 0.8158)],
)
def test_bioequivalence_crossover_other_table_cells(cv, total, power):
    # published: Diletti, Hauschke & Steinijans (1991), the same table (0.80–1.25, alpha .05,
    # power .80), ratio 0.95 row: CV 10 % -> 8, 15 % -> 12, 20 % -> 20, 30 % -> 40 in total
    # (recalled, recomputed here: the exact method gives each printed N). The powers at those N
    # are this method's output (formula), not printed numbers.
    record = answer(bioequivalence(cv=cv))
    assert record["sample_size"]["total"] == total
    assert record["power"]["estimate"] == pytest.approx(power, abs=5e-5)


def test_bioequivalence_power_at_28_and_27():
    # published N = 28 (the same table cell) reaches .80; the power 0.8074 and one subject
    # fewer (13 + 14) falling below 0.80 are this method's output (formula).
    at = answer(bioequivalence(find="power", sample_size={"per_group": [14, 14]}))
    assert at["power"]["estimate"] == pytest.approx(0.8074, abs=5e-5)
    below = answer(bioequivalence(find="power", sample_size={"per_group": [13, 14]}))
    assert below["power"]["estimate"] < 0.8


def test_continuous_crossover_on_log_scale_equals_the_ratio_cell():
    # formula: the ratio cell is the crossover t on ln exposures, margin ln 1.25.
    sd = math.sqrt(math.log(1 + 0.25**2))
    record = answer(
        crossover(
            alpha=0.05,
            target_power=0.8,
            alternative="one-sided",
            effect={"difference": math.log(0.95)},
            assumptions={"sd_within": sd},
            hypothesis=BE,
        )
    )
    assert record["sample_size"]["total"] == 28
    assert record["power"]["estimate"] == pytest.approx(0.8074, abs=5e-5)


def test_crossover_superiority_matches_statsmodels():
    # statsmodels TTestIndPower: the crossover t is a pooled two-sample t on the half period
    # differences, whose SD is σ_w/√2 (Jones & Kenward 2003, ch. 2), with N − 2 df.
    record = answer(crossover())
    effect_size = 0.5 / (1.0 / math.sqrt(2))
    raw = TTestIndPower().solve_power(effect_size=effect_size, alpha=0.05, power=0.8)
    assert record["sample_size"]["steps"][0]["per_group_raw"][0] == pytest.approx(raw, abs=1e-3)
    assert record["sample_size"]["per_group"] == [math.ceil(raw)] * 2
    power = answer(crossover(find="power", sample_size={"per_group": [12, 12]}))
    expected = TTestIndPower().power(effect_size=effect_size, nobs1=12, alpha=0.05)
    assert power["power"]["estimate"] == pytest.approx(expected, abs=1e-9)


def test_crossover_noninferiority_formula():
    # formula: one-sided noncentral t at (difference − margin)/SE, SE = σ_w·√(½·2/n), N − 2 df
    # (Chow, Shao & Wang 2008, ch. 3, with t in place of z); statsmodels one-sided power agrees.
    body = crossover(
        find="power",
        alternative="one-sided",
        alpha=0.025,
        effect={"difference": 0.0},
        hypothesis={"aim": "noninferiority", "margin": -0.4},
        sample_size={"per_group": [20, 20]},
    )
    record = answer(body)
    expected = TTestIndPower().power(
        effect_size=0.4 / (1 / math.sqrt(2)), nobs1=20, alpha=0.025, alternative="larger"
    )
    assert record["power"]["estimate"] == pytest.approx(expected, abs=1e-9)


def test_parallel_bioequivalence_matches_the_two_group_tost():
    # formula: the parallel ratio cell is the pooled-t TOST of continuous × two_groups on ln
    # exposures with σ² = ln(1 + CV²) (Phillips 1990's exact power for the parallel design).
    record = answer(bioequivalence("two_groups", cv=0.4))
    sd = math.sqrt(math.log(1 + 0.4**2))
    two = answer(
        {
            "outcome": "continuous",
            "layout": "two_groups",
            "analysis": "pooled_t",
            "find": "sample_size",
            "alpha": 0.05,
            "target_power": 0.8,
            "alternative": "one-sided",
            "effect": {"difference": math.log(0.95)},
            "assumptions": {"sd": sd},
            "hypothesis": BE,
        }
    )
    assert record["sample_size"]["per_group"] == two["sample_size"]["per_group"]
    assert record["power"]["estimate"] == pytest.approx(two["power"]["estimate"], abs=1e-12)


def test_parallel_superiority_matches_statsmodels():
    # statsmodels TTestIndPower on the log scale: effect size ln(ratio)/σ, σ² = ln(1 + CV²).
    body = bioequivalence(
        "two_groups",
        cv=0.5,
        ratio=1.3,
        alternative="two-sided",
        hypothesis={"aim": "superiority"},
        find="power",
        sample_size={"per_group": [40, 40]},
    )
    record = answer(body)
    es = math.log(1.3) / math.sqrt(math.log(1.25))
    assert record["power"]["estimate"] == pytest.approx(
        TTestIndPower().power(effect_size=es, nobs1=40, alpha=0.05), abs=1e-9
    )


def test_detectable_ratio_reaches_the_target():
    # formula: the solved ratio gives the target power back.
    body = bioequivalence(find="effect", sample_size={"per_group": [14, 14]}, target_power=0.8)
    del body["effect"]
    record = answer(body)
    ratio = record["effect"]["value"]
    assert 1.0 < ratio < 1.25
    assert record["power"]["estimate"] == pytest.approx(0.8, abs=1e-6)
    # the ratio and its reciprocal are equally far from 1 on the log scale
    back = answer(
        bioequivalence(ratio=1 / ratio, find="power", sample_size={"per_group": [14, 14]})
    )
    assert back["power"]["estimate"] == pytest.approx(0.8, abs=1e-6)


def test_limits_are_named_on_the_ratio_scale():
    record = answer(bioequivalence())
    notes = " ".join(record["method"]["notes"])
    assert "0.8–1.25" in notes


def test_a_ratio_outside_the_limits_is_refused_on_its_field():
    with pytest.raises(QuestionInvalid) as info:
        load_question(bioequivalence(ratio=1.3))
    assert "effect.ratio" in info.value.errors


# --- simulation against the exact power -----------------------------------------------------


def _simulated(body: dict, replicates: int = 4000) -> dict:
    sim = copy.deepcopy(body)
    sim.update(method="simulation", simulation={"replicates": replicates, "seed": 20261202})
    return answer(sim)


def _agree(record: dict) -> None:
    power = record["power"]
    assert power["analytic"] is not None
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power


def test_simulated_crossover_with_subject_and_period_effects_agrees():
    body = crossover(
        find="power",
        sample_size={"per_group": [10, 12]},
        assumptions={"sd_within": 1.0, "sd_between": 2.0, "period_effect": 0.7},
        effect={"difference": 0.8},
    )
    record = _simulated(body)
    _agree(record)
    assert record["method"]["data"]["sd_between"] == 2.0
    assert record["type_i_error"]["verdict"] in ("holds", "conservative")


def test_simulated_crossover_equivalence_agrees():
    body = crossover(
        find="power",
        alternative="one-sided",
        alpha=0.05,
        effect={"difference": 0.1},
        hypothesis={"aim": "equivalence", "margin": 0.5},
        sample_size={"per_group": [15, 15]},
        assumptions={"sd_within": 0.6, "sd_between": 1.0},
    )
    _agree(_simulated(body))


@pytest.mark.parametrize("layout", ["crossover", "two_groups"])
def test_simulated_bioequivalence_agrees(layout):
    size = [14, 14] if layout == "crossover" else [60, 60]
    body = bioequivalence(layout, find="power", sample_size={"per_group": size})
    _agree(_simulated(body))


def test_simulated_bioequivalence_sample_size_search():
    record = _simulated(bioequivalence(), replicates=2000)
    # published 28 in total (Diletti et al. 1991); the simulated search lands within a size or so
    assert abs(record["sample_size"]["total"] - 28) <= 4


def test_bioequivalence_without_alpha_tests_each_side_at_five_percent():
    # Schuirmann (1987): average bioequivalence by two one-sided tests at 0.05 each (the 90%
    # interval inside 0.80–1.25), so the Diletti et al. (1991) answer (N = 28) comes out when no
    # alpha is posted; other equivalence margins keep one-sided 0.025 (ICH E9, 1998).
    body = bioequivalence()
    body.pop("alpha")
    q = load_question(body)
    assert q["alpha"] == 0.05
    record = compute(q)
    assert record["sample_size"]["total"] == 28
    assert "Schuirmann 1987" in record["method"]["alpha_note"]
    other = crossover(hypothesis={"aim": "equivalence", "margin": 1.0}, alternative="one-sided")
    assert load_question(other)["alpha"] == 0.025
