"""A posted data model states its own effect: derived from the groups, checked against posted fields.

References: lognormal moments E = exp(μ + σ²/2), Var = (exp(σ²) − 1)·exp(2μ + σ²) (formula:
Johnson, Kotz & Balakrishnan 1994, Continuous Univariate Distributions vol. 1, ch. 14); P(Y > X)
in closed form for normal, exponential and Cauchy arms (formula: the difference of independent
normals / Cauchys; the exponential race λx/(λx + λy)); Noether (1987), JASA 82:645, for the
rank-sum starting n; bernoulli and Poisson ties by exact enumeration computed here with scipy.
"""

import math

import pytest
from scipy import stats

from service.engine import compute, estimate_cost, implied
from service.engine.approximate import first_size
from service.engine.errors import QuestionError
from service.engine.plan import make_plan
from service.schemas.question import QuestionInvalid, load_question

LOGNORMAL = {
    "control": {"family": "lognormal", "mu": 1.4, "sigma": 0.7},
    "treatment": {"family": "lognormal", "mu": 1.15, "sigma": 0.7},
}


def _lognormal(mu, sigma):
    s2 = sigma * sigma
    return math.exp(mu + s2 / 2), math.sqrt(math.expm1(s2) * math.exp(2 * mu + s2))


TWO_GROUPS = ("continuous", "two_groups")


def posted(
    cell=TWO_GROUPS,
    data=LOGNORMAL,
    effect=None,
    assumptions=None,
    find="power",
    per_group=(100, 100),
):
    raw = {
        "outcome": cell[0],
        "layout": cell[1],
        "find": find,
        "method": "simulation",
        "simulation": {"seed": 911, "replicates": 400, "search_replicates": 400, "data": data},
    }
    if effect is not None:
        raw["effect"] = effect
    if assumptions is not None:
        raw["assumptions"] = assumptions
    if find == "power":
        raw["sample_size"] = {"per_group": list(per_group)}
    return load_question(raw)


def test_lognormal_arms_state_their_own_difference_and_sds():
    m1, s1 = _lognormal(1.4, 0.7)
    m2, s2 = _lognormal(1.15, 0.7)
    assert (m2 - m1, s1, s2) == pytest.approx((-1.146035, 4.119852, 3.208544), abs=1e-6)
    record = compute(posted())  # no effect fields: the data model implies them
    eff, assumed = record["question"]["effect"], record["question"]["assumptions"]
    assert eff["difference"] == pytest.approx(m2 - m1, rel=1e-12)
    assert assumed["sd_control"] == pytest.approx(s1, rel=1e-12)
    assert assumed["sd_treatment"] == pytest.approx(s2, rel=1e-12)
    block = record["method"]["implied_effect"]
    assert block["source"] == "simulation.data"
    assert block["fields"] == [
        "assumptions.sd_control",
        "assumptions.sd_treatment",
        "effect.difference",
    ]


@pytest.mark.parametrize(
    "difference, sd, field, shown",
    [
        (-1, 3, "effect.difference", "is -1 but"),
        (5, 1, "effect.difference", "is 5 but"),
        (-1.146, 3, "assumptions.sd", "is 3 but"),
    ],
)
def test_effect_fields_that_disagree_with_the_data_model_are_refused(difference, sd, field, shown):
    with pytest.raises(QuestionError) as err:
        compute(posted(effect={"difference": difference}, assumptions={"sd": sd}))
    assert err.value.field == field
    assert shown in str(err.value) and "implies" in str(err.value)


def test_rounded_effect_fields_that_agree_are_accepted_and_kept_in_the_record():
    record = compute(
        posted(effect={"difference": -1.15}, assumptions={"sd_control": 4.12, "sd_treatment": 3.21})
    )
    block = record["method"]["implied_effect"]
    assert block["posted"] == {
        "effect.difference": -1.15,
        "assumptions.sd_control": 4.12,
        "assumptions.sd_treatment": 3.21,
    }
    assert record["question"]["effect"]["difference"] == pytest.approx(-1.146035, abs=1e-6)


def test_the_justification_states_the_implied_effect():
    from service.reports.justification import justification

    text = justification(compute(posted()))
    assert "a difference in means of -1.14604" in text
    assert "4.11985 in the control group and 3.20854 in the treatment group" in text
    assert "Welch's t test" in text  # the groups' SDs differ: the default analysis is Welch
    assert "the one this data model implies" in text


@pytest.mark.parametrize(
    "control, treatment, exact",
    [
        (  # normal: P(Y > X) = Φ(Δ / √(σx² + σy²))
            {"family": "normal", "mean": 0, "sd": 1},
            {"family": "normal", "mean": 0.5, "sd": 2},
            stats.norm.cdf(0.5 / math.sqrt(5)),
        ),
        (  # exponential race: P(Y > X) = λx / (λx + λy), λ = 1/scale
            {"family": "exponential", "scale": 2.0},
            {"family": "exponential", "scale": 3.0},
            0.5 / (0.5 + 1 / 3),
        ),
        (  # Cauchy: Y − X is Cauchy(Δ, s1 + s2)
            {"family": "cauchy", "loc": 0, "scale": 1},
            {"family": "cauchy", "loc": 1, "scale": 2},
            0.5 + math.atan(1 / 3) / math.pi,
        ),
        (  # bernoulli, ties count one half: p2(1 − p1) + ½(p1p2 + (1 − p1)(1 − p2))
            {"family": "bernoulli", "p": 0.3},
            {"family": "bernoulli", "p": 0.6},
            0.6 * 0.7 + 0.5 * (0.3 * 0.6 + 0.7 * 0.4),
        ),
    ],
)
def test_prob_superiority_matches_closed_forms(control, treatment, exact):
    assert implied.prob_superiority(control, treatment) == pytest.approx(exact, abs=1e-8)


def test_prob_superiority_of_poisson_arms_matches_exact_enumeration():
    x, y = stats.poisson(3.0), stats.poisson(4.0)
    exact = sum(
        y.pmf(k) * (x.cdf(k - 1) + 0.5 * x.pmf(k)) for k in range(0, 80)
    )  # exact enumeration over the support
    got = implied.prob_superiority(
        {"family": "poisson", "mean": 3.0}, {"family": "poisson", "mean": 4.0}
    )
    assert got == pytest.approx(exact, abs=1e-10)


def test_prob_superiority_of_a_contaminated_arm_is_the_mixture_of_its_parts():
    control = {"family": "normal", "mean": 0, "sd": 1}
    wide = {"family": "contaminated_normal", "mean": 0.3, "sd": 1, "contamination": 0.2}
    wide["sd_factor"] = 5
    exact = 0.8 * stats.norm.cdf(0.3 / math.sqrt(2)) + 0.2 * stats.norm.cdf(0.3 / math.sqrt(26))
    assert implied.prob_superiority(control, wide) == pytest.approx(exact, abs=1e-8)


def test_rank_sum_states_the_p_its_data_model_implies_and_starts_from_noether():
    q = posted(("ordinal", "two_groups"), find="sample_size")
    p = stats.norm.cdf(-0.25 / (0.7 * math.sqrt(2)))  # equal-shape lognormals: Φ(Δμ/(σ√2))
    record = compute(q)
    assert record["question"]["effect"]["prob_superiority"] == pytest.approx(p, abs=1e-8)
    # Noether (1987): N = (z.975 + z.80)² / (3·(p − ½)²) in total, equal arms.
    noether = (stats.norm.ppf(0.975) + stats.norm.ppf(0.8)) ** 2 / (3 * (p - 0.5) ** 2) / 2
    assert record["search"]["start_source"] == "normal approximation"
    assert record["search"]["start"][0] == math.ceil(noether)


def test_sample_size_search_starts_from_the_data_model_not_the_effect_fields():
    # The posted fields agree with the arms, so they are accepted, but the start still comes
    # from the data model's own approximation (the search record says which).
    q = posted(
        effect={"difference": -1.146},
        assumptions={"sd_control": 4.12, "sd_treatment": 3.21},
        find="sample_size",
    )
    record = compute(q)
    assert record["search"]["start_source"] == "normal approximation"
    m0 = first_size(make_plan(q, 0.05), 0.8)
    assert record["search"]["start"] == [math.ceil(m0)] * 2
    # and the cost estimate comes from the data model too: the same with or without the fields,
    # and it follows the arms (a larger shift needs fewer draws)
    bare = posted(find="sample_size")
    assert estimate_cost(q) == estimate_cost(bare) > 0
    wider = dict(LOGNORMAL, treatment={"family": "lognormal", "mu": 0.9, "sigma": 0.7})
    assert estimate_cost(posted(data=wider, find="sample_size")) < estimate_cost(bare)


def test_cauchy_arms_have_no_moments_the_posted_fields_are_flagged_as_not_simulated():
    data = {
        "control": {"family": "cauchy", "loc": 0, "scale": 1},
        "treatment": {"family": "cauchy", "loc": 1, "scale": 1},
    }
    record = compute(posted(data=data, effect={"difference": 1}, assumptions={"sd": 1}))
    block = record["method"]["implied_effect"]
    assert block["not_implied"] == ["effect.difference", "assumptions.sd"]
    assert "cauchy (loc 1, scale 1)" in block["note"]
    assert any("could not be checked" in w for w in record["warnings"])


def test_exponential_event_times_imply_the_hazard_ratio():
    data = {
        "control": {"family": "exponential", "scale": 12 / math.log(2)},
        "treatment": {"family": "exponential", "scale": 16 / math.log(2)},
    }
    timeline = {"time_unit": "months", "control_median": 12, "accrual": 12, "follow_up": 12}
    cell = ("time_to_event", "two_groups")
    record = compute(posted(cell, data, {"hazard_ratio": 0.75}, timeline))
    assert record["question"]["effect"]["hazard_ratio"] == pytest.approx(0.75, rel=1e-12)
    with pytest.raises(QuestionError) as err:
        compute(posted(cell, data, {"hazard_ratio": 0.6}, timeline))
    assert err.value.field == "effect.hazard_ratio"


def test_effect_fields_stay_required_without_a_data_model():
    with pytest.raises(QuestionInvalid) as err:
        load_question(
            {
                "outcome": "continuous",
                "layout": "two_groups",
                "method": "simulation",
                "simulation": {"seed": 1},
            }
        )
    assert "effect.difference" in err.value.errors or "assumptions.sd" in err.value.errors
