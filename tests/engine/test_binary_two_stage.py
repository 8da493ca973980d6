"""Binary outcome, two-stage single-arm study: Simon's (1989) optimal and minimax designs by exact
enumeration, checked against the published table, an independent brute-force search and scipy's
binomial sums; then a posted design's power, simulated against the exact power within 4 MCSE."""

from __future__ import annotations

import copy

import pytest
from scipy import stats

from service.engine import QuestionError, two_stage
from service.schemas import QuestionInvalid, load_question
from tests.posted import SIMON, posted, record_of, simon_posted


def question(**over) -> dict:
    return posted(SIMON, **over)


def _brute(n1: int, r1: int, n: int, r: int, p: float) -> tuple[float, float]:
    """(P(promising), PET) by a double sum of scipy.stats.binom.pmf terms (formula)."""
    promising = 0.0
    for x1 in range(r1 + 1, n1 + 1):
        for x2 in range(n - n1 + 1):
            if x1 + x2 > r:
                promising += stats.binom.pmf(x1, n1, p) * stats.binom.pmf(x2, n - n1, p)
    return promising, stats.binom.cdf(r1, n1, p)


# published: Simon (1989), Controlled Clin Trials 10:1, Table 1 (alpha .05, power .80); also in
# sizewise's reference table. Recomputed by exact enumeration.
SIMON_TABLE_1 = [
    (0.20, 0.40, "optimal", (3, 13, 12, 43), 20.6, 0.75),
    (0.20, 0.40, "minimax", (4, 18, 10, 33), 22.3, 0.72),
]
# from memory: two more rows of Simon (1989), Table 1 (alpha .05, power .80), recalled without
# the table at hand; this enumeration and the brute-force search below reproduce them.
FROM_MEMORY = [
    (0.10, 0.30, "optimal", (1, 10, 5, 29), 15.0, 0.74),
    (0.10, 0.30, "minimax", (1, 15, 5, 25), 19.5, 0.55),
    (0.05, 0.25, "optimal", (0, 9, 2, 17), 12.0, 0.63),
    (0.05, 0.25, "minimax", (0, 12, 2, 16), 13.8, 0.54),
]


@pytest.mark.parametrize(("p0", "p1", "criterion", "design", "en", "pet"), SIMON_TABLE_1)
def test_published_simon_designs(p0, p1, criterion, design, en, pet):
    body = question(effect={"p": p1}, assumptions={"p_null": p0})
    body["analysis_options"] = {"criterion": criterion}
    record = record_of(body)
    block = record["sample_size"]["details"]["two_stage"]
    assert (block["r1"], block["n1"], block["r"], block["n"]) == design
    assert round(block["expected_n_null"], 1) == en
    assert round(block["pet_null"], 2) == pet
    assert block["criterion"] == criterion
    assert record["sample_size"]["per_group"] == [design[3]]
    assert record["power"]["estimate"] == pytest.approx(block["power"])
    # formula: the design's error rates by the double binomial sum
    r1, n1, r, n = design
    assert block["type_i_error"] == pytest.approx(_brute(n1, r1, n, r, p0)[0], abs=1e-12)
    assert block["power"] == pytest.approx(_brute(n1, r1, n, r, p1)[0], abs=1e-12)
    assert block["type_i_error"] <= 0.05 and block["power"] >= 0.8


@pytest.mark.parametrize(("p0", "p1", "criterion", "design", "en", "pet"), FROM_MEMORY)
def test_more_simon_rows(p0, p1, criterion, design, en, pet):
    found = two_stage.search(p0, p1, 0.05, 0.8, 60)[criterion]
    assert (found.r1, found.n1, found.r, found.n) == design
    assert round(found.expected_n_null, 1) == en
    assert round(found.pet_null, 2) == pet


def test_search_matches_an_independent_brute_force_search():
    # formula: every design with n ≤ 20 (p0 .05, p1 .25, alpha .05, power .80) by plain loops
    # over n, n1, r1 and r with scipy.stats.binom; the optimal minimizes E(N | p0), the minimax
    # the largest n first.
    p0, p1 = 0.05, 0.25
    pmf = {
        (m, p): [stats.binom.pmf(k, m, p) for k in range(m + 1)]
        for m in range(21)
        for p in (p0, p1)
    }

    def promising(n1, r1, n, r, p):
        a, b = pmf[(n1, p)], pmf[(n - n1, p)]
        return sum(
            a[x1] * b[x2] for x1 in range(r1 + 1, n1 + 1) for x2 in range(n - n1 + 1) if x1 + x2 > r
        )

    admissible = []
    for n in range(2, 21):
        for n1 in range(1, n):
            for r1 in range(n1):
                for r in range(r1, n):
                    if promising(n1, r1, n, r, p0) <= 0.05:
                        if promising(n1, r1, n, r, p1) >= 0.8:
                            pet = sum(pmf[(n1, p0)][: r1 + 1])
                            admissible.append((n1 + (1 - pet) * (n - n1), n, n1, r1, r))
                        break  # a larger r only loses power
    optimal = min(admissible)
    minimax = min(admissible, key=lambda d: (d[1], d[0]))
    found = two_stage.search(p0, p1, 0.05, 0.8, 20)
    for d, got in ((optimal, found["optimal"]), (minimax, found["minimax"])):
        assert (got.n, got.n1, got.r1, got.r) == d[1:]
        assert got.expected_n_null == pytest.approx(d[0], abs=1e-12)


def test_power_of_a_posted_design():
    # published design (Simon 1989, Table 1, minimax for p0 .20 / p1 .40); its characteristics
    # by the double binomial sum (formula)
    record = record_of(simon_posted(18, 4, 33, 10))
    want_power = _brute(18, 4, 33, 10, 0.4)[0]
    want_alpha, want_pet = _brute(18, 4, 33, 10, 0.2)
    assert record["power"]["estimate"] == pytest.approx(want_power, abs=1e-12)
    derived = record["method"]["derived"]
    assert derived["design_type_i_error"] == pytest.approx(want_alpha, abs=1e-12)
    assert derived["design_pet_null"] == pytest.approx(want_pet, abs=1e-12)
    assert round(derived["design_expected_n_null"], 1) == 22.3


def test_the_alternative_is_one_sided_by_default_and_two_sided_is_refused():
    assert load_question(question())["alternative"] == "one-sided"
    with pytest.raises(QuestionInvalid) as info:
        load_question(question(alternative="two-sided"))
    assert "alternative" in info.value.errors


def test_stage_fields_belong_to_find_power():
    body = question()
    body["analysis_options"] = {"stage1_size": 10}
    with pytest.raises(QuestionInvalid) as info:
        load_question(body)
    assert "analysis_options.stage1_size" in info.value.errors
    body = simon_posted(13, 3, 43, 12)
    del body["analysis_options"]["max_responses"]
    with pytest.raises(QuestionInvalid) as info:
        load_question(body)
    assert "analysis_options.max_responses" in info.value.errors


def test_an_impossible_posted_design_names_its_field():
    with pytest.raises(QuestionError) as info:
        record_of(simon_posted(13, 13, 43, 12))
    assert info.value.field == "analysis_options.stage1_max_responses"


def test_a_lower_rate_worth_pursuing_is_refused():
    with pytest.raises((QuestionError, QuestionInvalid)) as info:
        record_of(question(effect={"p": 0.1}))
    assert "effect.p" in str(getattr(info.value, "errors", None) or info.value.field)


def test_assurance_is_refused_on_its_field():
    body = question(assurance={"mean": 0.4, "sd": 0.05})
    with pytest.raises(QuestionError) as info:
        record_of(body)
    assert info.value.field == "assurance"


def test_no_design_within_max_n_names_the_field():
    body = question(effect={"p": 0.25})
    body["analysis_options"] = {"max_n": 20}
    with pytest.raises(QuestionError) as info:
        record_of(body)
    assert info.value.field == "analysis_options.max_n"


# --- simulation against the exact power ---------------------------------------------------------


def test_simulated_power_of_a_posted_design_agrees():
    body = simon_posted(13, 3, 43, 12)
    body.update(method="simulation", simulation={"replicates": 4000, "seed": 20261202})
    record = record_of(copy.deepcopy(body))
    power = record["power"]
    assert power["analytic"] == pytest.approx(_brute(13, 3, 43, 12, 0.4)[0])
    assert abs(power["estimate"] - power["analytic"]) <= 4 * power["mcse"], power
    # the null check simulates p_null: its rejection rate is the design's type I error (0.0496)
    t1 = record["type_i_error"]
    assert abs(t1["estimate"] - _brute(13, 3, 43, 12, 0.2)[0]) <= 4 * t1["mcse"], t1
