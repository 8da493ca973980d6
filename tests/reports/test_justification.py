"""The justification paragraph: every number from the record, nothing that contradicts it."""

import math
import re

import pytest
from reports_testkit import answer
from scipy import stats
from statsmodels.stats.power import TTestIndPower

from service.reports.justification import (
    fmt_count,
    fmt_num,
    fmt_pct,
    fmt_power,
    fmt_prob,
    justification,
)

# A count with thousands separators (1,016) or a plain decimal (0.025); "−" is wording.
_NUMBER = re.compile(r"(?<![\w.])-?(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d+)?")


def _numbers(text: str) -> set[str]:
    return {m.group(0) for m in _NUMBER.finditer(text)}


def _record_numbers(record: dict) -> set[str]:
    """Every number the record can justify, in each format the paragraph uses."""
    out: set[str] = set()

    def walk(value):
        if isinstance(value, dict):
            for v in value.values():
                walk(v)
        elif isinstance(value, list):
            for v in value:
                walk(v)
        elif isinstance(value, bool) or value is None:
            return
        elif isinstance(value, (int, float)):
            out.update(
                {
                    fmt_num(value),
                    fmt_count(value) if float(value).is_integer() else fmt_num(value),
                    str(value),
                    f"{value:.2f}",
                    f"{value:.1f}",  # effective (fractional) sizes are told with one decimal
                    fmt_prob(value),
                    fmt_prob(value, 4),
                    fmt_pct(value).rstrip("%"),
                    fmt_pct(round(value, 3)).rstrip("%"),
                    fmt_power(value).rstrip("%"),
                    f"{100 * value:.1f}",  # a Monte Carlo error in percentage points
                }
            )
        elif isinstance(value, str):
            out.update(_numbers(value))

    walk({k: v for k, v in record.items() if k != "cautions"})
    # Sums the paragraph states: the base size over the arms.
    for step in record["sample_size"]["steps"]:
        if step["step"] == "base":
            out.add(fmt_count(sum(step["per_group"])))
    out.update({"1", "95"})  # "1 − dropout" and "95% interval" are wording, not record values
    return out


def _assert_no_foreign_numbers(text: str, record: dict, source: str = "") -> None:
    foreign = _numbers(text.replace(source, "") if source else text) - _record_numbers(record)
    assert not foreign, f"numbers not in the record: {sorted(foreign)}\n{text}"


def test_analytic_contains_each_step(analytic_record):
    text = justification(analytic_record, {"effect_source": "the Northbridge pilot study of 2023"})
    size = analytic_record["sample_size"]
    steps = {s["step"]: s for s in size["steps"]}
    # formula: noncentral t at alpha 0.05 / 2 (Bonferroni), d = 0.5, power .80; statsmodels agrees
    raw = TTestIndPower().solve_power(effect_size=0.5, alpha=0.025, power=0.8, ratio=1.0)
    assert steps["base"]["per_group"] == [math.ceil(raw)] * 2
    # formula: Donner & Klar (2000) design effect with the analyzed cluster size after 20%
    # dropout: 1 + (16 − 1)·0.05 = 1.75; whole clusters of 20 enrolled (clusters × 20 people)
    assert steps["design_effect"]["factor"] == pytest.approx(1.75)
    k = size["clusters_per_group"][0]
    assert size["per_group"] == [20 * k, 20 * k]
    for piece in (
        "two-sided significance level of 0.05",
        "Bonferroni over 2 comparisons",
        "0.025 per comparison",
        "target power of 80%",
        "difference in means of 0.5",
        fmt_num(analytic_record["question"]["assumptions"]["sd"]),
        f"{math.ceil(raw)} per group",
        f"unrounded {raw:.2f}",
        "design effect 1.75",
        "mean cluster size 20",
        "16 analyzed after 20% dropout",
        "intracluster correlation 0.05",
        f"{steps['design_effect']['per_group_raw'][0]:.2f} individuals per group",
        f"{steps['design_effect']['clusters_per_group'][0]} clusters per group",
        f"{steps['cluster_df']['df']} degrees of freedom",
        f"{k} clusters per group",
        f"{size['per_group'][0]} people per group",
        f"{fmt_count(size['total'])} are to be enrolled in total in {2 * k} clusters",
        f"The power at the analyzed size is {fmt_power(analytic_record['power']['estimate'])}.",
        "Northbridge pilot study of 2023",
        analytic_record["method"]["approximation"],
        analytic_record["method"]["analysis_label"],
    ):
        assert piece in text, piece
    for word in ("simulat", "seed", "replicate", "Monte Carlo", "events"):
        assert word not in text.lower(), word
    _assert_no_foreign_numbers(text, analytic_record, "Northbridge pilot study of 2023")


def test_simulated_sample_size_reports_monte_carlo_error(simulated_record):
    text = justification(simulated_record)
    power, repro = simulated_record["power"], simulated_record["reproducibility"]
    t1 = simulated_record["type_i_error"]
    # formula: MCSE = √(p(1 − p)/R), Morris, White & Crowther (2019), Stat Med 38:2074
    assert power["mcse"] == pytest.approx(
        math.sqrt(power["estimate"] * (1 - power["estimate"]) / power["replicates"])
    )
    # published 64 ± 1 per group: Cohen 1988, Table 2.4.1 (simulated solve for d = 0.5, power .80)
    base = next(s for s in simulated_record["sample_size"]["steps"] if s["step"] == "base")
    assert 62 <= base["per_group"][0] <= 66
    for piece in (
        f"seed {repro['seed']}",
        f"{fmt_count(power['replicates'])} replicates",
        f"estimated power {fmt_power(power['estimate'])}",
        f"standard error {100 * power['mcse']:.1f} percentage points",
        f"95% interval {fmt_power(power['ci95'][0])} to {fmt_power(power['ci95'][1])}",
        f"type I error was {fmt_prob(t1['estimate'], 4)}",
        f"nominal {fmt_num(t1['alpha'])}",
        f"{fmt_count(simulated_record['question']['simulation']['search_replicates'])} replicates each",
        f"{base['per_group'][0]} per group",
        "10% dropout",
        f"{fmt_count(simulated_record['sample_size']['total'])} are to be enrolled in total",
        repro["bit_generator"],
    ):
        assert piece in text, piece
    # the paragraph says the record's own verdict word, and it matches the interval
    lo, hi = t1["ci95"]
    assert ("the type I error check holds" in text) == (lo <= t1["alpha"] <= hi)
    assert "unrounded" not in text  # a simulated search has no unrounded answer to quote
    _assert_no_foreign_numbers(text, simulated_record)


def test_simulated_power_against_the_noncentral_t(simulated_power_record):
    text = justification(simulated_power_record)
    power = simulated_power_record["power"]
    # formula: noncentral t power at d = 0.5, n = 30 per group is 0.4779 (recomputed with statsmodels TTestIndPower);
    # statsmodels TTestIndPower agrees; the simulated estimate lies within 4 MCSE of it
    exact = TTestIndPower().power(effect_size=0.5, nobs1=30, alpha=0.05, ratio=1.0)
    assert exact == pytest.approx(0.4779, abs=1e-4)
    assert abs(power["estimate"] - exact) < 4 * power["mcse"]
    for piece in (
        "30 enrolled per group (60 in total)",
        f"is {fmt_power(power['estimate'])}",
        f"analytic formula gives a power of {fmt_power(power['analytic'])}",
        f"seed {simulated_power_record['reproducibility']['seed']}",
    ):
        assert piece in text, piece
    assert "target power" not in text  # a power question has no target
    _assert_no_foreign_numbers(text, simulated_power_record)


def test_survival_states_events_and_p_event(survival_record):
    text = justification(survival_record)
    z = stats.norm.ppf(0.975) + stats.norm.ppf(0.8)
    # formula: Schoenfeld (1983), Biometrics 39:499: events = 4(z.975 + z.80)²/ln²HR = 379.35 -> 380
    events = 4 * z**2 / math.log(0.75) ** 2
    assert events == pytest.approx(379.35, abs=0.01)

    # formula: Lachin & Foulkes (1986), Biometrics 42:507: P(event) = 1 − [e^(−λf) − e^(−λ(a+f))]/(λa)
    def p_event(lam, a=24.0, f=12.0):
        return 1 - (math.exp(-lam * f) - math.exp(-lam * (a + f))) / (lam * a)

    lam = math.log(2) / 12
    pc, pt = p_event(lam), p_event(lam * 0.75)
    assert pc == pytest.approx(0.729495, abs=1e-6)
    per_group = math.ceil(math.ceil(events) / ((pc + pt) / 2) / 2)
    assert survival_record["sample_size"]["per_group"] == [per_group, per_group]
    for piece in (
        f"{math.ceil(events)} events are required",
        f"unrounded {events:.2f}",
        f"{fmt_prob(pc)} in the control group",
        f"{fmt_prob(pt)} in the treatment group",
        f"{per_group} per group",
        f"{fmt_count(2 * per_group)} in total",
        "0.75",
        "12 months",  # the control median, as entered, with its time unit
        "24 months",
    ):
        assert piece in text, piece
    assert "simulat" not in text.lower()
    _assert_no_foreign_numbers(text, survival_record)


def test_missing_source_is_flagged_not_invented(survival_record):
    text = justification(survival_record, None)
    assert "[State the source of the assumed values" in text
    assert "based on" not in text
    sourced = justification(
        survival_record, {"effect_source": "the Northbridge registry 2019–2022"}
    )
    assert "based on the Northbridge registry 2019–2022." in sourced


@pytest.mark.parametrize(
    ("posted", "pieces"),
    [
        # published 63 per group (h = 0.5): Cohen 1988, Table 6.4.1, recomputed; here p .40 vs .60,
        # formula 97 per group without correction (Fleiss, Levin & Paik 2003)
        (
            {
                "outcome": "binary",
                "effect": {"p_treatment": 0.6},
                "assumptions": {"p_control": 0.4},
            },
            ["97 per group", "0.4", "0.6"],
        ),
        # published 53 per group (k = 3, f = 0.25, ceiling): Cohen 1988, Table 8.4.4, recomputed
        (
            {
                "layout": "k_groups",
                "effect": {"cohens_f": 0.25},
                "assumptions": {"group_count": 3},
            },
            ["53 per group", "0.25"],
        ),
        # formula: one-sample noncentral t, d = 0.5 -> 34 (Guenther 1981 gives 33.32 raw)
        ({"layout": "single_group"}, ["34 participants"]),
        # formula: noncentral t with n2 = 2·n1, d = 0.5 -> 48 / 96 (Cohen 1988 eq. 2.3.1)
        (
            {"allocation_ratio": 2.0},
            ["48 in the control group and 96 in the treatment group", "144 in total"],
        ),
    ],
)
def test_other_cells(posted, pieces):
    record = answer(**posted)
    text = justification(record)
    for piece in pieces:
        assert piece in text, piece
    _assert_no_foreign_numbers(text, record)
    if posted.get("layout") == "k_groups":
        assert "two-sided" not in text  # the F test has no direction


def test_noninferiority_names_the_margin():
    # published 13 with z quantiles (Chow, Shao & Wang 2008, ch. 3); 14 with the noncentral t
    record = answer(
        effect={"difference": 0.05},
        assumptions={"sd": 0.1},
        alternative="one-sided",
        alpha=0.05,
        hypothesis={"aim": "noninferiority", "margin": -0.05},
    )
    text = justification(record)
    assert record["sample_size"]["per_group"] == [14, 14]
    assert "non-inferiority with a margin of -0.05" in text
    assert "one-sided significance level of 0.05" in text
    assert "14 per group" in text
    _assert_no_foreign_numbers(text, record)


def test_the_number_check_catches_a_contradiction(analytic_record):
    # Guard the guard: a per-group size the record does not hold must be flagged.
    text = justification(analytic_record).replace("200 people per group", "199 people per group")
    assert "199 people" in text
    with pytest.raises(AssertionError, match="199"):
        _assert_no_foreign_numbers(text, analytic_record)


def test_simulated_effect_names_effects_not_sizes():
    # formula: at 64 per group the detectable d at 80% power is just under 0.5 (Cohen 1988,
    # Table 2.4.1 gives n = 64 for d = 0.5; statsmodels TTestIndPower solves the same)
    record = answer(
        effect={},
        find="effect",
        method="simulation",
        sample_size={"per_group": [64, 64]},
        simulation={"replicates": 2000, "search_replicates": 1000, "seed": 99},
    )
    text = justification(record)
    assert "Candidate effects were screened" in text and "chosen effect was confirmed" in text
    assert "at the simulated effect" in text and "Candidate sizes" not in text
    ref = TTestIndPower().solve_power(nobs1=64, power=0.8, alpha=0.05, ratio=1.0)
    assert abs(record["effect"]["value"] - ref) < 0.05
    _assert_no_foreign_numbers(text, record)


def test_cluster_power_and_fixed_clusters_are_told_in_whole_clusters():
    # Donner & Klar (2000): 8 clusters of 20 per arm; Eldridge, Ashby & Kerry (2006) design
    # effect 1 + ((0.4² + 1)·16 − 1)·0.05 = 1.878 with 16 analyzed per cluster after 20% dropout
    record = answer(
        find="power",
        sample_size={"per_group": [160, 160]},
        adjustments={"dropout": 0.2, "cluster": {"mean_size": 20, "icc": 0.05, "cv": 0.4}},
    )
    text = justification(record)
    assert "in 8 clusters per group of mean size 20" in text
    assert "a design effect of 1.878" in text
    assert "only 8 clusters per group" in text
    _assert_no_foreign_numbers(text, record)
    record = answer(adjustments={"cluster": {"clusters_per_group": 12, "icc": 0.05}})
    text = justification(record)
    size = record["sample_size"]
    m = size["mean_cluster_size"]
    assert "12 clusters per group fixed" in text
    assert "smallest whole cluster size whose cluster-level t test" in text
    assert f"{fmt_count(12 * m)} people per group" in text
    _assert_no_foreign_numbers(text, record)


def test_settled_search_says_what_it_did(simulated_record):
    # formula: at 2,000 replicates the MCSE of power .80 is √(.8 × .2 / 2,000) = 0.0089 (Morris,
    # White & Crowther 2019), more than one size adds near 64 per group for d = 0.5, so the
    # search settles; the paragraph quotes the record's settled block, nothing else
    text = justification(simulated_record)
    settled = simulated_record["search"]["settled"]
    assert settled["mcse"] == pytest.approx(0.0089, abs=5e-5)
    for piece in (
        f"differ in simulated power by about {fmt_prob(settled['power_per_size'], 4)}",
        f"standard error of one run ({fmt_prob(settled['mcse'], 4)})",
        "did not look for the exact size where power crosses the target",
        f"smallest run with {fmt_count(simulated_record['power']['replicates'])} replicates",
        f"±{settled['sizes_per_mcse']:.1f} in the first group's size",
    ):
        assert piece in text, piece
    below = settled["failing_below"]
    if below is None:
        assert "no smaller size was run with the full count" in text
    else:
        assert f"had power {fmt_power(below['power'])}" in text
    _assert_no_foreign_numbers(text, simulated_record)


def test_exact_search_has_no_settled_words(simulated_record):
    # common practice, no source: a search that found n and n − 1 says nothing about settling
    record = {**simulated_record, "search": {**simulated_record["search"]}}
    record["search"].pop("settled")
    assert "did not look for the exact size" not in justification(record)
