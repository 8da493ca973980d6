"""The n search: analytic start, geometric bracket, bisection, confirmation, bounded work."""

import math

import pytest
from scipy import stats
from statsmodels.stats.power import TTestIndPower
from statsmodels.stats.proportion import proportion_confint

from service.engine import compute, search, simulate
from service.engine.errors import BudgetExceeded, QuestionError
from tests.engine.questions import make_q


def curve(shift: float = 0.0):
    """A deterministic evaluator: two-sided z-test power for d = 0.5 at m per group (formula)."""
    calls = []

    def evaluate(ms, reps, null_at):
        calls.append((list(ms), reps, null_at))
        out = []
        for m in ms:
            p = stats.norm.cdf(0.5 * math.sqrt(m / 2) - 1.959964) + (shift if reps < 10000 else 0.0)
            out.append(search.Estimate(round(min(max(p, 0.0), 1.0) * reps), reps))
        return out

    return evaluate, calls


def exact_answer(target=0.8):
    """The smallest m with normal-approximation power ≥ target at 10,000 rounded replicates."""
    m = 2
    while round(stats.norm.cdf(0.5 * math.sqrt(m / 2) - 1.959964) * 10000) / 10000 < target:
        m += 1  # a reference computed by brute force in the test, not by the code under test
    return m


def solve(evaluate, start, **kw):
    args = dict(
        start=start,
        m_min=2,
        m_max=10**6,
        target=0.8,
        rule="point",
        search_replicates=2000,
        replicates=10000,
    )
    args.update(kw)
    return search.smallest_n(evaluate, **args)


@pytest.mark.parametrize("start", [63.0, 40.0, 100.0, 20.0, 300.0])
def test_finds_the_smallest_n_in_few_candidates(start):
    # formula: normal-approximation power Φ(d√(n/2) − z.975); 63 per group for d = 0.5 (raw 62.79)
    evaluate, calls = curve()
    result = solve(evaluate, start)
    assert result.m == exact_answer() == 63
    assert result.candidates[0][0] == round(start)  # starts from the given start, not from m_min
    assert len(result.candidates) <= search.MAX_CANDIDATES
    assert [c[0][0] for c in calls if c[1] == 2000] == [m for m, _ in result.candidates]


def test_never_scans_linearly():
    # common practice, no source: bisection, not a walk of +1 steps from a small n
    evaluate, _ = curve()
    result = solve(evaluate, 10.0)
    ms = [m for m, _ in result.candidates]
    steps = [b - a for a, b in zip(ms, ms[1:], strict=False)]
    assert sum(1 for s in steps if s == 1) <= 2
    assert len(ms) <= search.MAX_CANDIDATES


def test_confirmation_at_n_and_n_minus_1_with_full_replicates():
    # common practice, no source: the answer is confirmed at n and n − 1 with the full count
    evaluate, calls = curve()
    result = solve(evaluate, 63.0)
    (m1, e1), (m0, e0) = result.confirmation
    assert (m1, m0) == (63, 62) and e1.replicates == e0.replicates == 10000
    assert e1.power >= 0.8 > e0.power
    confirm = [c for c in calls if c[1] == 10000]
    # the search stage's error (MCSE 0.0089 over a slope of 0.006 per size) spans more than one
    # size, so one size runs first; its full run places the pair exactly: three runs in all
    assert sum(len(c[0]) for c in confirm) <= 3
    assert [m for c in confirm for m in c[0]].count(62) == 1


def test_a_steep_curve_confirms_the_pair_and_null_in_one_batch():
    # formula: normal-approximation power Φ(d√(m/2) − z.975); d = 1.55 crosses .80 at m = 6.53,
    # where a size gains 0.06 in power, 6.7 times the search stage's MCSE (0.0089)
    def steep(ms, reps, null_at):
        calls.append((list(ms), reps, null_at))
        return [
            search.Estimate(round(stats.norm.cdf(1.55 * math.sqrt(m / 2) - 1.959964) * reps), reps)
            for m in ms
        ]

    calls = []
    result = solve(steep, 7.0)
    confirm = [c for c in calls if c[1] == 10000]
    assert result.m == 7 and result.moves == 0
    assert confirm == [([7, 6], 10000, 7)]


@pytest.mark.parametrize("shift", [0.03, -0.03])
def test_contradicting_confirmation_moves_and_reconfirms(shift):
    # common practice, no source: a biased small run is corrected at full replicates (bounded)
    evaluate, _ = curve(shift)
    result = solve(evaluate, 63.0)
    assert result.m == 63 and result.moves > 0
    assert result.moves <= search.MAX_MOVES
    assert [m for m, _ in result.confirmation] == [63, 62]


def test_lower_bound_rule_needs_the_wilson_bound():
    # formula: Wilson score interval; the rule asks lower bound ≥ target at the full count
    evaluate, _ = curve()
    result = solve(evaluate, 63.0, rule="lower_bound")
    (m1, e1), (_, e0) = result.confirmation
    assert e1.ci95[0] >= 0.8 > e0.ci95[0]
    assert m1 > 63


def test_unreachable_target_is_a_question_error():
    # common practice, no source: an effect that cannot be detected names target_power
    def flat(ms, reps, null_at):
        return [search.Estimate(reps // 10, reps) for _ in ms]

    with pytest.raises(QuestionError) as info:
        solve(flat, 50.0, m_max=5000)
    assert info.value.field == "target_power"


def test_target_met_at_the_smallest_size_warns():
    # common practice, no source: a huge effect is met at the smallest allowed size
    def strong(ms, reps, null_at):
        return [search.Estimate(reps, reps) for _ in ms]

    result = solve(strong, 12.0)
    assert result.m == 2 and any("smallest size" in w for w in result.warnings)


def test_wilson_interval_matches_statsmodels():
    # recomputed: statsmodels proportion_confint(method="wilson")
    for k, n in [(800, 1000), (3, 200), (0, 50), (50, 50)]:
        lo, hi = proportion_confint(k, n, alpha=0.05, method="wilson")
        assert search.wilson(k, n) == pytest.approx([lo, hi], abs=1e-7)


def test_mcse_reference():
    # formula: Morris, White & Crowther (2019): √(p(1 − p)/R); p = .80, R = 1000 → 0.01265
    assert search.Estimate(800, 1000).mcse == pytest.approx(0.01265, abs=5e-6)
    # same source: 10,000 replicates keep the worst case (p = .5) at MCSE 0.005
    assert search.Estimate(5000, 10000).mcse == pytest.approx(0.005)


def _two_groups(**sim):
    """The two-means simulation question these tests search on (seed 11, Student t)."""
    return make_q("continuous", "two_groups", simulation={"seed": 11, **sim})


def test_simulated_search_starts_from_the_analytic_start():
    # published 64 per group: Cohen 1988, Table 2.4.1 (raw 63.77), used as the start; answer ±2
    out = simulate.answer(_two_groups(), 0.05, per_group=None, start=[63.77, 63.77])
    s = out["search"]
    assert s["start"] == [63.77, 63.77] and s["start_source"] == "analytic"
    assert s["candidates"][0]["per_group"] == [64, 64]
    assert len(s["candidates"]) <= search.MAX_CANDIDATES
    assert abs(out["per_group"][0] - 64) <= 2


def test_simulated_search_from_its_own_normal_approximation():
    # formula: z approximation 2(z.975 + z.80)²/d² + 1 = 63.8 when no analytic start is given
    q = _two_groups(
        data={
            "control": {"family": "normal", "mean": 0.0, "sd": 1.0},
            "treatment": {"family": "normal", "mean": 0.5, "sd": 1.0},
        }
    )
    out = simulate.answer(q, 0.05, per_group=None, start=None)
    assert out["search"]["start_source"] == "normal approximation"
    assert out["search"]["candidates"][0]["per_group"] == [64, 64]
    assert abs(out["per_group"][0] - 64) <= 2


def test_simulated_search_from_a_poor_start_stays_bounded():
    # published 64 per group: Cohen 1988, Table 2.4.1; a start at a third of it still converges
    out = simulate.answer(_two_groups(), 0.05, per_group=None, start=[21.0, 21.0])
    assert len(out["search"]["candidates"]) <= search.MAX_CANDIDATES
    assert abs(out["per_group"][0] - 64) <= 2


# --- what the search spends --------------------------------------------------------------------


def _counting_executor(seen: list, chunks: list | None = None):
    def executor(tasks):
        seen.extend((t["stream"], tuple(t["per_group"]), t["replicates"]) for t in tasks)
        if chunks is not None:
            chunks.extend((t["stream"], tuple(t["per_group"]), t["chunk"]) for t in tasks)
        return [simulate.run_chunk(t) for t in tasks]

    return executor


def _for_n(n: float, **sim) -> dict:
    """Two means whose z-approximation answer is n per group: d = (z.975 + z.80)·√(2/n)."""
    d = (1.959964 + 0.841621) * math.sqrt(2 / n)
    effect = {"difference": d, "sd_control": 1.0, "sd_treatment": 1.0}
    return make_q(
        "continuous",
        "two_groups",
        effect=effect,
        simulation={"seed": 11, **sim},
    )


@pytest.mark.parametrize("n", [20, 200])
def test_search_spends_little_beyond_the_minimum(n):
    # common practice, no source: the minimum any n search runs is the full count at n and n − 1
    # plus the type I check at n (3 × 10,000); the confirmation stage may add at most half of it
    seen: list = []
    out = simulate.answer(_for_n(n), 0.05, executor=_counting_executor(seen))
    block = out["search"]["replicates_run"]
    reps = 10000
    assert block["minimum"] == 3 * reps
    assert block["null"] == sum(r for s, _, r in seen if s == 1) == reps
    assert block["search"] + block["full"] == sum(r for s, _, r in seen if s == 0)
    assert (
        block["total"]
        == block["search"] + block["full"] + block["null"]
        == sum(r for *_, r in seen)
    )
    assert block["full"] + block["null"] <= 1.5 * block["minimum"]
    assert block["search"] == 2000 * len(out["search"]["candidates"])
    first, second = out["search"]["confirmation"]
    assert first["power"] >= 0.8 > second["power"]  # the decision rule still holds at n, n − 1
    assert second["per_group"][0] == first["per_group"][0] - 1 == out["per_group"][0] - 1


def test_search_counts_every_replicate_once_and_bounds_the_moves():
    # common practice, no source: chunks a candidate already ran are reused, not redrawn
    seen: list = []
    chunks: list = []
    out = simulate.answer(_for_n(2000), 0.05, executor=_counting_executor(seen, chunks))
    assert len(chunks) == len(set(chunks))
    block = out["search"]["replicates_run"]
    assert block["total"] == sum(r for *_, r in seen)
    assert out["search"]["moves"] <= search.MAX_N_MOVES
    assert block["full"] <= (2 + search.MAX_N_MOVES) * 10000
    (m1, e1), (m0, e0) = [(c["per_group"][0], c) for c in out["search"]["confirmation"]]
    # one size adds about 0.0002 in power here, far below the MCSE of 0.004: the confirmation
    # settles on the smallest passing full run; below it lies a failing full run, not n − 1
    assert m0 < m1 and e1["power"] >= 0.8 > e0["power"]
    settled = out["search"]["settled"]
    assert settled["failing_below"] == {
        k: e0[k] for k in ("per_group", "replicates", "power", "mcse")
    }
    assert settled["power_per_size"] < settled["mcse"]
    # formula: z approximation 2000 per group (t test: 2001); Monte Carlo error at 10,000
    # replicates is about 0.004 in power, 20 sizes here: 4 MCSE is ±80
    assert abs(m1 - 2001) <= 80


# The bench's n-search cases (tests/bench/bench_engine.py, (7)): pooled t, d set so that the
# z approximation gives n per group, seeds 11–15, 10,000 replicates, 2,000 per search candidate.
BENCH_SEEDS = (11, 12, 13, 14, 15)


def _bench_case(n: int, seed: int) -> dict:
    d = (1.959964 + 0.841621) * math.sqrt(2 / n)
    return make_q(
        "continuous",
        "two_groups",
        effect={"difference": d},
        assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
        analysis="pooled_t",
        simulation={"seed": seed},
    )


def _reference_n(n: int) -> tuple[int, float]:
    """statsmodels' pooled t answer for the bench case and the power one size adds there."""
    d = (1.959964 + 0.841621) * math.sqrt(2 / n)
    solver = TTestIndPower()
    m = math.ceil(solver.solve_power(effect_size=d, alpha=0.05, power=0.8, ratio=1.0))
    return m, solver.power(d, m, 0.05) - solver.power(d, m - 1, 0.05)


@pytest.mark.parametrize("n", [20, 200, 2000])
def test_search_replicates_within_one_and_a_half_times_the_minimum(n):
    # common practice, no source: the minimum any n search runs is the full count at n and
    # n − 1 plus the type I check (3 × 10,000); the search may spend at most half as much again.
    # Counted from the chunks the executor ran, not from timings.
    for seed in BENCH_SEEDS:
        seen: list = []
        record = compute(_bench_case(n, seed), executor=_counting_executor(seen))
        block = record["search"]["replicates_run"]
        assert block["minimum"] == 30000
        assert block["total"] == sum(r for *_, r in seen)
        assert block["total"] <= 1.5 * block["minimum"], (seed, block)


@pytest.mark.parametrize("n", [20, 200, 2000])
def test_search_answer_within_monte_carlo_error_of_the_analytic_answer(n):
    # recomputed: statsmodels TTestIndPower.solve_power (pooled t, noncentral t) gives 22, 201
    # and 2001 per group; 10,000 replicates give power an MCSE of 0.004 (Morris, White &
    # Crowther 2019), which is 0.004 / (power one size adds) sizes: 4 of those, at least 1 size
    m_ref, per_size = _reference_n(n)
    tolerance = max(1.0, 4 * 0.004 / per_size)
    for seed in BENCH_SEEDS:
        record = compute(_bench_case(n, seed))
        m = record["sample_size"]["per_group"][0]
        assert abs(m - m_ref) <= tolerance, (seed, m, m_ref, tolerance)
        assert record["power"]["estimate"] >= 0.8  # the reported size meets the target
        settled = record["search"].get("settled")
        if settled is not None:  # only where one size adds less than the MCSE
            assert per_size < 0.004 and settled["power_per_size"] < settled["mcse"]
            assert settled["sizes_per_mcse"] == pytest.approx(0.004 / per_size, rel=0.5)


def test_settled_record_shows_the_runs_it_chose_from():
    # common practice, no source: every number in the settled block is a full run the search
    # made; the reported n is the smallest of them whose power met the target
    out = simulate.answer(_for_n(2000), 0.05)
    s = out["search"]
    settled = s["settled"]
    runs = [*settled["pair"], *([settled["failing_below"]] if settled["failing_below"] else [])]
    assert all(r["replicates"] == 10000 for r in runs)
    passing = [r["per_group"][0] for r in runs if r["power"] >= 0.8]
    assert out["per_group"][0] == min(passing)
    assert s["confirmation"][0]["power"] == out["power"]["estimate"]
    assert settled["sizes_per_mcse"] == pytest.approx(settled["mcse"] / settled["power_per_size"])


@pytest.mark.parametrize("start", [1900.0, 2200.0])
def test_flat_curve_settles_after_one_pair(start):
    # formula: normal-approximation power Φ(d√(m/2) − z.975) with d = 0.0886 (about 2,000 per
    # group), where one size adds 0.0002 in power: far below the 0.004 MCSE of a full run.
    # The search stage sees the same curve, so the full runs are the first run and one pair.
    d = (1.959964 + 0.841621) * math.sqrt(2 / 2000)
    calls = []

    def flat(ms, reps, null_at):
        calls.append((list(ms), reps))
        return [
            search.Estimate(round(stats.norm.cdf(d * math.sqrt(m / 2) - 1.959964) * reps), reps)
            for m in ms
        ]

    def passes(m):
        return round(stats.norm.cdf(d * math.sqrt(m / 2) - 1.959964) * 10000) >= 8000

    result = solve(flat, start)
    exact = 1900
    while not passes(exact):
        exact += 1  # brute force, in the test
    full = [m for ms, r in calls if r == 10000 for m in ms]
    assert len(full) <= 3 and result.settled is not None
    assert passes(result.m) and exact <= result.m <= exact + result.settled["sizes_per_mcse"]


def test_budget_is_enforced_on_the_draws_made():
    # exact count: sufficient statistics draw a mean and a variance per group, 4 per replicate
    seen: list = []
    q = _for_n(200)
    out = simulate.answer(q, 0.05, executor=_counting_executor(seen))
    drawn = 4 * sum(r for *_, r in seen)
    assert out["search"]["replicates_run"]["draws"] == drawn
    again: list = []
    same = simulate.answer(q, 0.05, executor=_counting_executor(again), budget=drawn)
    assert same["per_group"] == out["per_group"] and again == seen  # the exact budget is enough
    stopped: list = []
    with pytest.raises(BudgetExceeded) as info:
        simulate.answer(q, 0.05, executor=_counting_executor(stopped), budget=drawn - 1)
    assert 4 * sum(r for *_, r in stopped) <= drawn - 1  # refused before drawing past it
    assert info.value.field == "simulation.replicates"
    assert "has drawn" in info.value.message and f"{drawn - 1:,}" in info.value.message


def test_confirmation_without_a_slope_gallops_then_bisects():
    # common practice, no source: with no slope to go by (power 0 below 40, 1 from 40 on, so
    # no probit line fits), the full runs double their steps and bisect; they never walk by one
    calls = []

    def cliff(ms, reps, null_at):
        calls.append((list(ms), reps))
        shift = 5 if reps < 10000 else 0  # the search stage sees the cliff 5 sizes early
        return [search.Estimate(reps if m >= 40 - shift else 0, reps) for m in ms]

    result = solve(cliff, 60.0)
    assert result.m == 40 and [m for m, _ in result.confirmation] == [40, 39]
    full = [m for ms, r in calls if r == 10000 for m in ms]
    assert len(full) <= 8 and result.moves <= search.MAX_N_MOVES
