"""Simulated power against exact power, reference rows, reproducibility and the null check."""

import copy
import dataclasses
import json
import math
import random

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.power import TTestIndPower

from service.engine import simulate
from service.engine.chunks import Streams, run_chunk
from service.engine.errors import Cancelled, QuestionError
from service.engine.plan import make_plan
from service.engine.runner import make_task
from tests.engine.questions import make_q

NORMAL_EFFECT = {"difference": 0.5, "sd_control": 1.0, "sd_treatment": 1.0}
TWO_GROUPS = ("continuous", "two_groups")
SINGLE = ("continuous", "single_group")
PAIRED = ("continuous", "paired")
BINARY = ("binary", "two_groups")
K_GROUPS = ("continuous", "k_groups")
ASSOCIATION = ("association", "single_group")
ORDINAL = ("ordinal", "two_groups")
TIME_TO_EVENT = ("time_to_event", "two_groups")
TOP = ("alternative", "hypothesis", "allocation_ratio", "target_power", "analysis")
BLOCKS = ("effect", "assumptions", "analysis_options")


def question(cell=TWO_GROUPS, values=None, *, find="power", per_group=(30, 30), **sim) -> dict:
    """A simulation question at this file's seed and replicates; other keywords go to ``simulation``.

    ``values`` are field values placed in their declared blocks; ``alternative``,
    ``hypothesis``, ``allocation_ratio``, ``target_power``, ``analysis`` and the blocks are
    question-level keys.
    """
    top = {k: sim.pop(k) for k in (*TOP, *BLOCKS) if k in sim}
    return make_q(
        *cell,
        values=values,
        find=find,
        per_group=per_group if find == "power" else None,
        simulation={"replicates": 4000, "seed": 20240611, **sim},
        **top,
    )


def with_sufficient(p, summaries: bool):
    """The plan with summary statistics switched on or off (the raw-data path on normal groups)."""
    return dataclasses.replace(p, summaries=summaries)


def run(q, **kw):
    per_group = q["sample_size"]["per_group"] if q["find"] == "power" else None
    return simulate.answer(q, q["alpha"], per_group=per_group, start=kw.pop("start", None), **kw)


def within(est: dict, exact: float, k: float = 4.0) -> bool:
    """True when ``exact`` lies within k Monte Carlo standard errors of the estimate."""
    se = math.sqrt(exact * (1 - exact) / est["replicates"])
    return abs(est["estimate"] - exact) <= k * se


def nct_power(d, n1, n2, alpha=0.05):
    """Exact two-sided Student t power from the noncentral t (computed here with scipy)."""
    df = n1 + n2 - 2
    ncp = d / math.sqrt(1 / n1 + 1 / n2)
    tc = stats.t.isf(alpha / 2, df)
    return stats.nct.sf(tc, df, ncp) + stats.nct.cdf(-tc, df, ncp)


# --- power against exact power ----------------------------------------------------------------


@pytest.mark.parametrize("d,n", [(0.5, 30), (0.3, 60), (0.8, 15), (0.0, 25)])
@pytest.mark.parametrize("sufficient", [True, False])
def test_student_power_within_4_mcse_of_noncentral_t(d, n, sufficient):
    # formula: noncentral t power computed in the test with scipy.stats.nct
    q = question(
        effect={"difference": d},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        per_group=(n, n),
        analysis="pooled_t",
    )
    p = with_sufficient(make_plan(q, 0.05), sufficient)  # the raw-data path on normal groups
    rej = reps = 0
    for chunk in range(4):
        task = make_task(
            p, [n, n], stream=0, chunk=chunk, chunk_size=1000, replicates=1000, seed=99
        )
        out = run_chunk(task)
        rej, reps = rej + out["rejections"], reps + out["replicates"]
    assert within({"estimate": rej / reps, "replicates": reps}, nct_power(d, n, n))


def test_reference_power_d05_n30():
    # formula: noncentral t, 0.4779; statsmodels agrees (MCSE: Morris, White & Crowther 2019)
    exact = TTestIndPower().power(effect_size=0.5, nobs1=30, alpha=0.05, ratio=1.0)
    assert exact == pytest.approx(0.4779, abs=1e-4)
    out = run(question(replicates=10000))
    assert within(out["power"], exact)
    assert out["power"]["mcse"] == pytest.approx(
        math.sqrt(out["power"]["estimate"] * (1 - out["power"]["estimate"]) / 10000)
    )
    lo, hi = out["power"]["ci95"]
    assert lo < out["power"]["estimate"] < hi
    assert out["method"]["summary_statistics"] is True


def test_type_i_error_normal_null_n30():
    # common practice, no source: a t test under a normal null rejects at about alpha
    out = run(
        question(
            effect={"difference": 0.0},
            assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
            replicates=10000,
        )
    )
    assert within(out["power"], 0.05)
    assert within(out["type_i_error"], 0.05)
    assert out["type_i_error"]["verdict"] == "holds"


def test_reference_solve_d05_power80():
    # published 64 per group: Cohen 1988, Table 2.4.1 (±1 for Monte Carlo error)
    out = run(question(find="sample_size", replicates=40000))
    assert abs(out["per_group"][0] - 64) <= 1 and out["per_group"][0] == out["per_group"][1]
    first, second = out["search"]["confirmation"]
    assert first["power"] >= 0.8 > second["power"]
    assert second["per_group"][0] == first["per_group"][0] - 1
    assert first["replicates"] == second["replicates"] == 40000


def test_welch_unequal_sd_power_matches_statsmodels_approximation():
    # formula: Welch power ≈ noncentral t with Satterthwaite df (statsmodels-free, scipy.nct)
    effect = {"difference": 0.6, "sd_control": 1.0, "sd_treatment": 2.0}
    out = run(question(values=effect, per_group=(40, 60), analysis="welch_t", replicates=8000))
    se = math.sqrt(1 / 40 + 4 / 60)
    df = (1 / 40 + 4 / 60) ** 2 / ((1 / 40) ** 2 / 39 + (4 / 60) ** 2 / 59)
    tc = stats.t.isf(0.025, df)
    approx = stats.nct.sf(tc, df, 0.6 / se) + stats.nct.cdf(-tc, df, 0.6 / se)
    assert within(out["power"], approx)
    assert within(out["type_i_error"], 0.05)


def test_one_sample_power_matches_noncentral_t():
    # formula: one-sample noncentral t, ncp = d·√n, df = n − 1 (scipy.stats.nct)
    out = run(question(SINGLE, {"difference": 0.5, "sd": 1.0}, per_group=(34,), replicates=8000))
    tc = stats.t.isf(0.025, 33)
    exact = stats.nct.sf(tc, 33, 0.5 * math.sqrt(34)) + stats.nct.cdf(-tc, 33, 0.5 * math.sqrt(34))
    assert within(out["power"], exact)
    assert out["type_i_error"]["null_model"].startswith("group shifted to mean 0")


def test_anova_power_matches_noncentral_f():
    # formula: noncentral F with λ = f²·N (Cohen 1988, ch. 8), computed with scipy.stats.ncf
    q = question(
        K_GROUPS, {"cohens_f": 0.25, "group_count": 3}, per_group=(40, 40, 40), replicates=8000
    )
    out = run(q)
    crit = stats.f.isf(0.05, 2, 117)
    exact = stats.ncf.sf(crit, 2, 117, 0.25**2 * 120)
    assert within(out["power"], exact)
    assert within(out["type_i_error"], 0.05)


def test_noninferiority_power_matches_noncentral_t():
    # formula: one-sided shifted t, ncp = (Δ − margin)/(σ√(2/n)); Chow, Shao & Wang (2008) ch. 3 setting
    hyp = {"aim": "noninferiority", "margin": -0.05, "higher_is_better": True}
    effect = {"difference": 0.05, "sd_control": 0.1, "sd_treatment": 0.1}
    out = run(
        question(
            values=effect,
            per_group=(14, 14),
            alternative="one-sided",
            hypothesis=hyp,
            replicates=8000,
        )
    )
    df, ncp = 26, 0.1 / (0.1 * math.sqrt(2 / 14))
    exact = stats.nct.sf(stats.t.isf(0.05, df), df, ncp)
    assert within(out["power"], exact)
    assert within(out["type_i_error"], 0.05)  # null at the margin: exactly alpha for the t test
    assert "margin" in out["type_i_error"]["null_model"]


def test_tost_solve_near_reference():
    # formula: TOST σ = 0.1, Δ = 0, margin 0.05: 70 per group with the exact t, ±2
    hyp = {"aim": "equivalence", "margin": 0.05, "higher_is_better": True}
    effect = {"difference": 0.0, "sd_control": 0.1, "sd_treatment": 0.1}
    out = run(
        question(
            values=effect,
            find="sample_size",
            alternative="one-sided",
            hypothesis=hyp,
            replicates=20000,
        )
    )
    assert abs(out["per_group"][0] - 70) <= 2


def _exact_z_power(n1, n2, p1, p2, alpha=0.05):
    """Exact power of the pooled two-proportion z test by enumerating all outcomes (scipy.binom)."""
    c1, c2 = np.meshgrid(np.arange(n1 + 1), np.arange(n2 + 1), indexing="ij")
    pbar = (c1 + c2) / (n1 + n2)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (c2 / n2 - c1 / n1) / np.sqrt(pbar * (1 - pbar) * (1 / n1 + 1 / n2))
    reject = np.abs(np.nan_to_num(z)) > stats.norm.isf(alpha / 2)
    w = np.outer(
        stats.binom.pmf(np.arange(n1 + 1), n1, p1), stats.binom.pmf(np.arange(n2 + 1), n2, p2)
    )
    return float((w * reject).sum())


def test_pooled_z_power_matches_enumeration():
    # recomputed: exact power by full enumeration of binomial outcomes (scipy.stats.binom)
    q = question(
        BINARY,
        {"p_control": 0.4, "p_treatment": 0.6, "continuity_correction": False},
        per_group=(50, 60),
        replicates=8000,
    )
    out = run(q)
    assert within(out["power"], _exact_z_power(50, 60, 0.4, 0.6))
    assert within(out["type_i_error"], _exact_z_power(50, 60, 0.4, 0.4))


def test_fisher_power_matches_enumeration():
    # recomputed: exact power summing binomial weights of tables scipy.stats.fisher_exact rejects
    q = question(
        BINARY,
        {"p_control": 0.3, "p_treatment": 0.7, "continuity_correction": False},
        per_group=(20, 20),
        analysis="fisher_exact",
        replicates=8000,
    )
    out = run(q)
    pmf1 = stats.binom.pmf(np.arange(21), 20, 0.3)
    pmf2 = stats.binom.pmf(np.arange(21), 20, 0.7)
    exact = sum(
        pmf1[a] * pmf2[b]
        for a in range(21)
        for b in range(21)
        if stats.fisher_exact([[b, 20 - b], [a, 20 - a]]).pvalue <= 0.05
    )
    assert within(out["power"], exact)
    assert out["type_i_error"]["estimate"] <= 0.05 + 4 * out["type_i_error"]["mcse"]  # conservative


def test_binomial_counts_invert_the_cdf():
    # formula: the quantile c of u satisfies F(c − 1) < u ≤ F(c) (scipy.stats.binom.cdf)
    s = Streams(3, 0, 0)
    counts = s.binomial(0, 0.37, 45, 500)
    u = 1.0 - Streams(3, 0, 0).gen(0, 0).random(500)
    assert np.all(stats.binom.cdf(counts, 45, 0.37) >= u - 1e-12)
    assert np.all(stats.binom.cdf(counts - 1, 45, 0.37) < u)


def test_correlation_matches_raw_bivariate_normal():
    # recomputed: an independent raw-data simulation with numpy and the t test of ρ = 0
    out = run(question(ASSOCIATION, {"r": 0.3, "r_null": 0.0}, per_group=(50,), replicates=8000))
    rng = np.random.default_rng(7)
    z = rng.standard_normal((8000, 2, 50))
    x, y = z[:, 0], 0.3 * z[:, 0] + math.sqrt(1 - 0.09) * z[:, 1]
    r = np.array([np.corrcoef(a, b)[0, 1] for a, b in zip(x, y, strict=True)])
    t = r * math.sqrt(48) / np.sqrt(1 - r * r)
    raw = float(np.mean(np.abs(t) > stats.t.isf(0.025, 48)))
    se = math.sqrt(2 * raw * (1 - raw) / 8000)
    assert abs(out["power"]["estimate"] - raw) <= 4 * se
    assert within(out["type_i_error"], 0.05)  # the t test of ρ = 0 is exact for normal pairs


def test_rank_sum_null_and_noether_power():
    # formula: Noether (1987) normal approximation, N = (z + z)²/(12c(1 − c)(p − ½)²); loose (±0.03)
    out = run(question(ORDINAL, {"prob_superiority": 0.6382}, per_group=(69, 69), replicates=6000))
    z = stats.norm.ppf(0.975)
    noether = stats.norm.cdf(math.sqrt(138 * 12 * 0.25 * (0.6382 - 0.5) ** 2) - z)
    assert abs(out["power"]["estimate"] - noether) < 0.03
    assert within(out["type_i_error"], 0.05)


def test_signed_rank_null():
    # common practice, no source: the signed-rank test under a symmetric null rejects at about alpha
    q = question(
        PAIRED,
        {"difference": 0.4, "sd_difference": 1.0},
        per_group=(30,),
        analysis="signed_rank",
        replicates=6000,
    )
    out = run(q)
    assert within(out["type_i_error"], 0.05)
    assert out["method"]["summary_statistics"] is False


def test_kruskal_null_with_lognormal_groups():
    # common practice, no source: Kruskal–Wallis with identical groups rejects at about alpha
    data = {"groups": [{"family": "lognormal", "mu": 0.0, "sigma": 1.0}] * 3}
    q = question(
        K_GROUPS,
        {"cohens_f": 0.25, "group_count": 3},
        per_group=(20, 20, 20),
        analysis="kruskal_wallis",
        data=data,
        replicates=4000,
    )
    assert within(run(q)["type_i_error"], 0.05)


SURVIVAL = {
    "hazard_ratio": 0.5,
    "control_hazard": math.log(2) / 12,
    "accrual": 24.0,
    "follow_up": 12.0,
    "loss_hazard": 0.0,
}


def test_logrank_events_match_lachin_foulkes():
    # formula: P(event) = 1 − [e^(−λf) − e^(−λ(a+f))]/(λa), Lachin & Foulkes (1986); control 0.729495
    q = question(TIME_TO_EVENT, SURVIVAL, per_group=(60, 60), replicates=2000)
    out = run(q)
    lam = math.log(2) / 12

    def p_event(h):
        return 1 - (math.exp(-h * 12) - math.exp(-h * 36)) / (h * 24)

    assert p_event(lam) == pytest.approx(0.729495, abs=1e-6)
    mean_events = 60 * p_event(lam) + 60 * p_event(lam * 0.5)
    sd = math.sqrt(
        60 * p_event(lam) * (1 - p_event(lam)) + 60 * p_event(lam / 2) * (1 - p_event(lam / 2))
    )
    assert abs(out["events"]["mean_per_replicate"] - mean_events) <= 4 * sd / math.sqrt(2000)
    assert within(out["type_i_error"], 0.05)


def test_logrank_power_near_schoenfeld():
    # formula: Schoenfeld (1983): power = Φ(√(D/4)·|ln HR| − z.975) at the expected events D; ±0.03
    q = question(TIME_TO_EVENT, SURVIVAL, per_group=(50, 50), replicates=4000)
    out = run(q)
    d = out["events"]["mean_per_replicate"]
    approx = stats.norm.cdf(math.sqrt(d / 4) * math.log(2) - stats.norm.ppf(0.975))
    assert abs(out["power"]["estimate"] - approx) < 0.03


def test_heavy_tails_show_in_the_null_check():
    # common practice, no source: Welch on skewed lognormal arms of very different spread loses its level
    data = {
        "control": {"family": "lognormal", "mu": 0.0, "sigma": 1.5},
        "treatment": {"family": "lognormal", "mu": 0.0, "sigma": 0.3},
    }
    out = run(question(per_group=(10, 40), analysis="welch_t", data=data, replicates=4000))
    assert out["type_i_error"]["verdict"] == "exceeds"
    assert any("type I error" in w for w in out["warnings"])


# --- reproducibility ---------------------------------------------------------------------------


def test_same_question_and_seed_give_the_same_answer():
    # common practice, no source: a seeded simulation is a pure function of question and seed
    q = question(find="sample_size", replicates=3000)
    assert run(copy.deepcopy(q)) == run(copy.deepcopy(q))
    other = copy.deepcopy(q)
    other["simulation"]["seed"] += 1
    assert run(other)["power"] != run(q)["power"]


def test_shuffled_chunks_through_json_give_the_same_digits():
    # common practice, no source: digits must not depend on which process ran which chunk, or when
    q = question(
        ORDINAL, {"prob_superiority": 0.62}, find="sample_size", replicates=3000, chunk_size=500
    )
    shuffler = random.Random(5)

    def executor(tasks):
        order = list(range(len(tasks)))
        shuffler.shuffle(order)
        results = {}
        for i in order:  # out of order and through JSON, as a worker pool would
            results[i] = json.loads(json.dumps(run_chunk(json.loads(json.dumps(tasks[i])))))
        return [results[i] for i in range(len(tasks))]

    assert run(copy.deepcopy(q), executor=executor) == run(copy.deepcopy(q))


@pytest.mark.parametrize(
    "cell,values,analysis,data,per_group",
    [
        (
            TWO_GROUPS,
            NORMAL_EFFECT,
            "welch_t",
            {
                "control": {"family": "lognormal", "mu": 0.0, "sigma": 1.0},
                "treatment": {"family": "gamma", "shape": 2.0, "scale": 1.0},
            },
            [70, 40],
        ),
        (
            TWO_GROUPS,
            NORMAL_EFFECT,
            "rank_sum",
            {
                "control": {"family": "poisson", "mean": 3.0},
                "treatment": {"family": "negative_binomial", "mean": 4.0, "dispersion": 2.0},
            },
            [33, 35],
        ),
        (
            PAIRED,
            {"difference": 0.3, "sd_difference": 1.0},
            "signed_rank",
            {
                "differences": {
                    "family": "contaminated_normal",
                    "mean": 0.3,
                    "sd": 1.0,
                    "contamination": 0.1,
                    "sd_factor": 5.0,
                }
            },
            [45],
        ),
        (K_GROUPS, {"cohens_f": 0.3, "group_count": 3}, "kruskal_wallis", None, [20, 21, 22]),
        (TIME_TO_EVENT, SURVIVAL, "logrank", None, [40, 50]),
        (TWO_GROUPS, NORMAL_EFFECT, "pooled_t", None, [64, 64]),
    ],
)
def test_memory_sub_batches_do_not_change_digits(cell, values, analysis, data, per_group):
    # common practice, no source: rows drawn in any sub-batch size give the same numbers
    q = question(cell, values, per_group=per_group, analysis=analysis, data=data)
    p = make_plan(q, 0.05)
    for stream in (0, 1):
        task = make_task(
            p, per_group, stream=stream, chunk=3, chunk_size=300, replicates=300, seed=41
        )
        whole = run_chunk(dict(task))
        assert whole == run_chunk(dict(task, max_rows=7))
        assert 0 < whole["replicates"] == 300


def test_partial_chunk_is_a_prefix_of_the_full_chunk():
    # common practice, no source: a chunk's first m replicates are the same whatever m
    p = make_plan(
        question(
            analysis="welch_t",
            data={
                "control": {"family": "exponential", "scale": 1.0},
                "treatment": {"family": "exponential", "scale": 1.6},
            },
        ),
        0.05,
    )
    base = make_task(p, [30, 30], stream=0, chunk=0, chunk_size=1000, replicates=1000, seed=3)
    first = run_chunk(dict(base, replicates=400))
    rest_whole = run_chunk(dict(base, replicates=1000, max_rows=400))
    assert first["rejections"] <= rest_whole["rejections"]
    # with max_rows = 400 the first sub-batch is exactly the 400-replicate chunk
    s1 = Streams(3, 0, 0)
    s2 = Streams(3, 0, 0)
    a = s1.raw(0, p.models[0], 30, 1000)
    b = s2.raw(0, p.models[0], 30, 400)
    assert np.array_equal(a[:400], b)


def test_common_random_numbers_nest_samples_across_n():
    # common practice, no source: candidate n and n + k share their first n observations
    arm = {"family": "lognormal", "mu": 0.0, "sigma": 1.0}
    small = Streams(8, 0, 2).raw(0, arm, 45, 50)
    large = Streams(8, 0, 2).raw(0, arm, 100, 50)
    assert np.array_equal(small, large[:, :45])
    null = Streams(8, 1, 2).raw(0, arm, 45, 50)
    assert not np.array_equal(small, null)  # the null check has its own stream


def test_reproducibility_block_documents_the_scheme():
    # common practice, no source: a record carries what is needed to redo it
    out = run(question())
    rep = out["reproducibility"]
    assert rep["bit_generator"] == "PCG64" and rep["seed"] == 20240611 and rep["chunk_size"] == 1000
    assert "spawn_key=(stream, chunk, group, variate, block)" in rep["seed_scheme"]
    json.dumps(out, allow_nan=False)  # plain JSON


# --- hooks and errors ------------------------------------------------------------------------------


def test_progress_is_monotone_and_cancel_stops():
    # common practice, no source: progress between chunks; cancel raises between chunks
    seen = []
    run(question(find="sample_size", replicates=3000), progress=seen.append)
    assert seen and seen == sorted(seen) and 0 < seen[-1] <= 1
    calls = []

    def cancel():
        calls.append(1)
        return len(calls) > 2

    with pytest.raises(Cancelled):
        run(question(replicates=5000), cancel=cancel)


def test_external_executor_receives_whole_batches():
    # common practice, no source: each run reaches the executor whole (all its chunks in one
    # batch), and the type I check runs once, at the answer, never at a size later abandoned
    batches = []

    def executor(tasks):
        batches.append([(t["stream"], tuple(t["per_group"]), t["chunk"]) for t in tasks])
        return [run_chunk(t) for t in tasks]

    out = run(question(find="sample_size", replicates=4000), executor=executor)
    n = tuple(out["per_group"])
    nulls = [b for b in batches if any(s == 1 for s, _, _ in b)]
    assert len(nulls) == 1 and {(s, p) for s, p, _ in nulls[0] if s == 1} == {(1, n)}
    assert sorted(c for s, _, c in nulls[0] if s == 1) == [0, 1, 2, 3]  # 4,000 in chunks of 1,000
    assert all(len(b) >= 2 for b in batches)  # search runs: 2 chunks; full runs: 4


@pytest.mark.parametrize(
    "mutate,field",
    [
        (lambda q: q.update(analysis="logrank"), "analysis"),
        (
            lambda q: q["simulation"].update(
                data={
                    "control": {"family": "normal", "mean": 0, "sd": 0},
                    "treatment": {"family": "normal", "mean": 1, "sd": 1},
                }
            ),
            "simulation.data.control.sd",
        ),
        (
            lambda q: q["simulation"].update(
                data={"group": {"family": "normal", "mean": 0, "sd": 1}}
            ),
            "simulation.data",
        ),
        (lambda q: q.update(find="odds"), "find"),
        (lambda q: q["simulation"].update(seed=None), "simulation.seed"),
        (lambda q: q["simulation"].update(decision_rule="median"), "simulation.decision_rule"),
        (
            lambda q: (
                q.update(
                    hypothesis={"aim": "noninferiority", "margin": -0.1, "higher_is_better": True},
                    alternative="one-sided",
                )
                or q.update(analysis="rank_sum")
            ),
            "analysis",
        ),
        (lambda q: q["assumptions"].pop("sd"), "assumptions.sd"),
    ],
)
def test_bad_questions_raise_question_errors(mutate, field):
    # common practice, no source: a bad question names the field, never a traceback
    q = question()
    mutate(q)
    with pytest.raises(QuestionError) as info:
        run(q)
    assert info.value.field == field


def test_wrong_per_group_shape_is_named():
    # common practice, no source: power needs one size per group
    q = question()
    with pytest.raises(QuestionError) as info:
        simulate.answer(q, 0.05, per_group=[30], start=None)
    assert info.value.field == "sample_size.per_group" and "[30]" in info.value.message


def test_survival_needs_positive_event_times():
    # common practice, no source: event times cannot be negative
    q = question(
        TIME_TO_EVENT,
        SURVIVAL,
        per_group=(40, 40),
        data={
            "control": {"family": "normal", "mean": 10, "sd": 2},
            "treatment": {"family": "exponential", "scale": 20},
        },
    )
    with pytest.raises(QuestionError) as info:
        run(q)
    assert info.value.field == "simulation.data.control.family"


def test_estimate_cost_counts_replicates_draws_and_candidates():
    # formula: power = 2 runs (effect and null) × R × draws per replicate
    q = question(replicates=10000)
    assert simulate.estimate_cost(q) == 2 * 10000 * 4  # sufficient statistics: 2 draws per group
    raw = question(per_group=(64, 64), analysis="rank_sum")
    assert simulate.estimate_cost(raw) == 2 * 4000 * 128
    solve = question(find="sample_size", replicates=10000)
    small = simulate.estimate_cost(solve)
    solve["simulation"]["replicates"] = 20000
    assert simulate.estimate_cost(solve) > small > 0
