"""Engine benchmarks: run with ``python -m tests.bench.bench_engine``; prints ratios from one run.

Goals (not asserted: the machine is shared): (1) vectorized Welch ≥ 200× a per-replicate
scipy loop; (2) full Welch path ≤ 1.5× just drawing the data; (3) summary statistics ≥ 10×
the raw-data path; (4) a simulated solve (d = 0.5, 80%, ≥ 10,000 replicates) ≤ 0.3 s;
(5) peak memory of a large raw-data simulation ≤ 256 MB and flat in the replicate count;
(6) analytic ``compute`` ≤ 1 ms and ≥ 2× faster than statsmodels' ``solve_power`` (same question);
(7) the simulated n search runs ≤ 1.5× the minimum replicates (n and n − 1 at the full count
plus the type I check) at n ≈ 20, 200 and 2,000 — a count, not a time, so not noisy;
(8) kernels near the cost of drawing their data: two proportions ≤ 2×, rank-sum ≤ 2×,
log-rank ≤ 5× their draw floors, Welch ≤ 1.5× (as in (2)); (9) group-sequential boundaries for
K = 5 in under 50 ms, and the simulated sequential test's per-replicate cost (the engine's
``sequential`` kernel, seqsim.py) beside the fixed design's kernel on the same question;
(10) exact enumerations under a second: the one-proportion exact power curve for n = 2 … 2,000,
the exact McNemar curve for n = 2 … 2,000, and Simon's two-stage search (p0 .05 vs p1 .15, every
n up to 100).
"""

from __future__ import annotations

import dataclasses
import time
import tracemalloc

import numpy as np
from scipy import stats

from service.engine import simulate
from service.engine.chunks import run_chunk
from service.engine.plan import make_plan
from service.engine.runner import make_task
from tests.engine.questions import make_q

N = 64  # per group
TWO_GROUPS = ("continuous", "two_groups")
ORDINAL = ("ordinal", "two_groups")
LOGNORMAL = {
    "control": {"family": "lognormal", "mu": 0.0, "sigma": 0.5},
    "treatment": {"family": "lognormal", "mu": 0.2, "sigma": 0.5},
}


def best(fn, repeat: int = 5) -> float:
    """Return the best wall time of ``repeat`` calls, in seconds."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def question(find: str, analysis: str, data: dict | None, replicates: int) -> dict:
    """A normalized two-group simulation question (Northbridge demo numbers: d = 0.5)."""
    simulation = {"replicates": replicates, "seed": 1, "data": data, "chunk_size": 10000}
    per_group = [N, N] if find == "power" else None
    return make_q(
        "continuous",
        "two_groups",
        analysis=analysis,
        find=find,
        simulation=simulation,
        per_group=per_group,
    )


def chunk_time(
    analysis: str, data: dict | None, reps: int, *, summaries: bool | None = None
) -> float:
    """Best seconds for run_chunk over ``reps`` replicates of the given analysis and data."""
    plan = make_plan(question("power", analysis, data, reps), 0.05)
    if summaries is not None:
        plan = dataclasses.replace(plan, summaries=summaries)
    task = make_task(plan, [N, N], stream=0, chunk=0, chunk_size=reps, replicates=reps, seed=1)
    return best(lambda: run_chunk(dict(task)))


def main() -> None:
    """Run the four benchmarks and print µs per replicate and the ratios."""
    reps = 20000
    rng = np.random.default_rng(1)

    loop_reps = 300
    x = rng.lognormal(0.0, 0.5, (loop_reps, N))
    y = rng.lognormal(0.2, 0.5, (loop_reps, N))

    def loop():
        for i in range(loop_reps):
            stats.ttest_ind(x[i], y[i], equal_var=False)

    t_loop = best(loop) / loop_reps
    t_welch = chunk_time("welch_t", LOGNORMAL, reps) / reps
    print(
        f"(1) scipy loop Welch: {t_loop * 1e6:8.2f} µs/rep; vectorized Welch (lognormal raw): "
        f"{t_welch * 1e6:6.3f} µs/rep; speed-up {t_loop / t_welch:7.0f}× (goal ≥ 200×)"
    )

    t_draw = best(lambda: np.random.default_rng(2).lognormal(0.0, 0.5, (reps, 2 * N))) / reps
    print(
        f"(2) numpy drawing 128 lognormals: {t_draw * 1e6:6.3f} µs/rep; full Welch path "
        f"{t_welch * 1e6:6.3f} µs/rep; ratio {t_welch / t_draw:5.2f} (goal ≤ 1.5)"
    )

    for analysis in ("pooled_t", "welch_t"):
        t_raw = chunk_time(analysis, None, reps, summaries=False) / reps
        t_suff = chunk_time(analysis, None, reps, summaries=True) / reps
        print(
            f"(3) normal {analysis}: raw data {t_raw * 1e6:6.3f} µs/rep; summary statistics "
            f"{t_suff * 1e6:6.3f} µs/rep; speed-up {t_raw / t_suff:5.1f}× (goal ≥ 10×)"
        )

    q = question("sample_size", "pooled_t", None, 10000)
    q["simulation"]["chunk_size"] = 1000
    out = {}

    def solve():
        out.update(simulate.answer(q, 0.05, per_group=None, start=None))

    t_solve = best(solve)
    print(
        f"(4) simulated solve d = 0.5, power .80, 10,000 replicates at the answer: {t_solve:.3f} s "
        f"(goal ≤ 0.3 s) → {out['per_group']} per group, power {out['power']['estimate']:.4f}, "
        f"{len(out['search']['candidates'])} search candidates"
    )


MEMORY_GOAL_MB = 256
BIG_N = 2000  # per group


def peak_mb(q: dict) -> tuple[float, float]:
    """Return (peak traced MB, seconds) of one simulated answer; numpy reports to tracemalloc."""
    tracemalloc.start()
    tracemalloc.reset_peak()
    t0 = time.perf_counter()
    try:
        simulate.answer(q, 0.05, per_group=q["sample_size"]["per_group"])
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return peak / 2**20, time.perf_counter() - t0


def memory() -> None:
    """Print the peak memory of large raw-data simulations at two replicate counts."""
    cases = [
        ("two groups welch_t, lognormal raw data", TWO_GROUPS, "welch_t", (20_000, 200_000)),
        # The rank-sum path assembles (rows, n) arrays and sorts them: the sub-batch cap matters.
        ("rank_sum, lognormal raw data", ORDINAL, "rank_sum", (2_000, 10_000)),
    ]
    for label, cell, analysis, counts in cases:
        for reps in counts:
            simulation = {"replicates": reps, "seed": 1, "data": LOGNORMAL, "chunk_size": 10000}
            q = make_q(*cell, analysis=analysis, per_group=[BIG_N, BIG_N], simulation=simulation)
            mb, seconds = peak_mb(q)
            print(
                f"(5) {label}, n = {BIG_N:,} per group, {reps:,} replicates: peak {mb:6.1f} MB, "
                f"{mb / MEMORY_GOAL_MB:5.3f} of the {MEMORY_GOAL_MB} MB goal ({seconds:.1f} s)"
            )


def analytic() -> None:
    """(6) Print analytic compute against statsmodels' solve_power for d = 0.5, 80%, 5% two-sided."""
    from statsmodels.stats.power import TTestIndPower

    from service.engine import compute
    from service.engine.examples import example_question

    q = example_question()
    compute(q)
    solver = TTestIndPower()
    loops = 200

    def ours():
        for _ in range(loops):
            compute(q)

    def theirs():
        for _ in range(loops):
            solver.solve_power(effect_size=0.5, alpha=0.05, power=0.8, ratio=1.0)

    t_ours, t_ref = best(ours) / loops, best(theirs) / loops
    print(
        f"(6) analytic compute {t_ours * 1e3:6.3f} ms (goal ≤ 1 ms); statsmodels solve_power "
        f"{t_ref * 1e3:6.3f} ms; ratio {t_ref / t_ours:5.2f}× faster (goal ≥ 2×)"
    )


SEARCH_SEEDS = (11, 12, 13, 14, 15)


def search_replicates() -> None:
    """(7) Print replicates run / minimum for the simulated n search at n ≈ 20, 200, 2,000, with
    where they went per seed: search candidates / full runs of the alternative / type I check,
    in thousands, and whether the confirmation settled below Monte Carlo noise (s) or found n
    and n − 1 (exact, x)."""
    import math

    from service.engine import compute

    for n in (20, 200, 2000):
        d = (1.959964 + 0.841621) * math.sqrt(2 / n)
        ratios, answers, stages = [], [], []
        for seed in SEARCH_SEEDS:
            q = make_q(
                "continuous",
                "two_groups",
                effect={"difference": d},
                assumptions={"sd_control": 1.0, "sd_treatment": 1.0},
                analysis="pooled_t",
                simulation={"seed": seed},
            )
            record = compute(q)
            block = record["search"]["replicates_run"]
            ratios.append(block["total"] / block["minimum"])
            answers.append(record["sample_size"]["per_group"][0])
            how = "s" if record["search"].get("settled") else "x"
            stages.append(
                f"{block['search'] // 1000}/{block['full'] // 1000}/{block['null'] // 1000}{how}"
            )
        print(
            f"(7) n search at n ≈ {n:,} (10,000 replicates, seeds {SEARCH_SEEDS[0]}–"
            f"{SEARCH_SEEDS[-1]}): replicates run / minimum "
            f"{' '.join(f'{r:.2f}' for r in ratios)}; mean {sum(ratios) / len(ratios):.2f}, "
            f"max {max(ratios):.2f} (goal ≤ 1.5); answers {answers}; thousands run "
            f"search/full/null {' '.join(stages)}"
        )


def kernel_floors() -> None:
    """(8) Print each kernel's time per replicate over the time of drawing its data with numpy."""
    reps = 20000

    def chunk(cell, analysis, per_group, data=None):
        simulation = {"seed": 1, "data": data, "replicates": reps, "chunk_size": reps}
        q = make_q(*cell, analysis=analysis, per_group=per_group, simulation=simulation)
        plan = make_plan(q, 0.05)
        task = make_task(
            plan, list(per_group), stream=0, chunk=0, chunk_size=reps, replicates=reps, seed=1
        )
        return best(lambda: run_chunk(dict(task))), task

    cases = []
    t, task = chunk(("binary", "two_groups"), "pooled_z", (300, 300))
    ps = [m["p"] for m in task["models"]]
    floor = best(lambda: [np.random.default_rng(2).binomial(300, p, reps) for p in ps])
    cases.append(("two proportions (z, 300/group; floor: numpy binomial counts)", t, floor, 2.0))
    t, task = chunk(ORDINAL, "rank_sum", (N, N), LOGNORMAL)
    floor = best(lambda: np.random.default_rng(2).lognormal(0.0, 0.5, (reps, 2 * N)))
    cases.append(("rank-sum (lognormal, 64/group; floor: the 128 lognormals)", t, floor, 2.0))
    t, task = chunk(("time_to_event", "two_groups"), "logrank", (150, 150))

    def survival_draws():
        g = np.random.default_rng(2)
        g.exponential(1.0, (reps, 300))
        g.random((reps, 300))

    floor = best(survival_draws)
    cases.append(("log-rank (150/group; floor: event and entry times)", t, floor, 5.0))
    t, _ = chunk(TWO_GROUPS, "welch_t", (N, N), LOGNORMAL)
    floor = best(lambda: np.random.default_rng(2).lognormal(0.0, 0.5, (reps, 2 * N)))
    cases.append(("Welch (lognormal, 64/group; floor: the 128 lognormals)", t, floor, 1.5))
    for label, t, floor, goal in cases:
        print(
            f"(8) {label}: {t / reps * 1e6:7.3f} µs/rep, floor {floor / reps * 1e6:7.3f} µs/rep; "
            f"ratio {t / floor:5.2f} (goal ≤ {goal:g})"
        )


def interim_boundaries() -> None:
    """(9) K = 5 boundaries under 50 ms; the engine's simulated sequential test per replicate
    against the fixed design's kernel (a statement of cost, not a goal)."""
    from service.engine import sequential as gs

    t = np.asarray(gs.equal(5))
    took = best(lambda: gs.efficacy_bounds(t, 0.05, 2, "obrien_fleming", -4.0), repeat=7)
    print(
        f"(9) K = 5 boundaries {took * 1e3:6.2f} ms; ratio {took / 0.05:5.2f} of 50 ms (goal ≤ 1)"
    )
    # The engine's own kernels: the simulated sequential test (seqsim.py, pooled t at each of
    # K = 5 looks from cumulative sums of the raw draws) against the fixed design's pooled t on
    # the same raw draws, and against the fixed design's summary-statistic draws (its default
    # for normal data). Same question, 20,000 replicates, n = 64 per group.
    reps = 20000
    base = question("power", "pooled_t", None, reps)
    staged = make_plan({**base, "interim": {"looks": 5}}, 0.05)
    fixed = make_plan(base, 0.05)

    def per_rep(plan) -> float:
        task = make_task(plan, [N, N], stream=0, chunk=0, chunk_size=reps, replicates=reps, seed=1)
        return best(lambda: run_chunk(dict(task)), repeat=3) / reps * 1e6

    t_staged = per_rep(staged)
    t_raw = per_rep(dataclasses.replace(fixed, summaries=False))
    t_summary = per_rep(fixed)
    print(
        f"(9) sequential test (K = 5, pooled t at every look) {t_staged:7.3f} µs/rep against the "
        f"fixed design's {t_raw:7.3f} µs/rep on raw draws (ratio {t_staged / t_raw:5.2f}) and "
        f"{t_summary:7.3f} µs/rep on summary statistics (ratio {t_staged / t_summary:6.1f})"
    )


def exact_enumerations() -> None:
    """(10) the exact enumerations against one second each."""
    from service.engine import exact_binomial, two_stage

    n = np.arange(2, 2001)
    for name, fn in (
        ("exact binomial curve, n ≤ 2,000", lambda: exact_binomial.power(n, 0.25, 0.2, 0.05, 2, 1)),
        (
            "exact McNemar curve, n ≤ 2,000",
            lambda: exact_binomial.conditional_power(n, 0.1, 0.6, 0.05, 2, 1),
        ),
        (
            "Simon search, n ≤ 100",
            lambda: two_stage.search.__wrapped__(0.05, 0.15, 0.05, 0.8, 100),
        ),
    ):
        took = best(fn, repeat=3)
        print(f"(10) {name}: {took:6.3f} s; ratio {took:5.2f} of 1 s (goal ≤ 1)")


def score_enumeration() -> None:
    """(11) The binary score tests by enumeration: one rejection table and its power at 200 per
    group (asymptotic MN test, goal under 1 s) and at 100 per group (exact unconditional test,
    a p-value maximized over 100 nuisance points per table, goal under 1 s)."""
    import math

    from service.engine.designs import binary_scales as bs

    margin = math.log(0.8)

    def asymptotic():
        grid = bs.reject_grid(200, 200, "risk_ratio", "noninferiority", margin, True, 0.025)
        return bs.enumerated_power(grid, 0.85, 0.85)

    def unconditional():
        grid = bs.unconditional_reject_grid(
            100, 100, "risk_ratio", "noninferiority", margin, True, 0.025
        )
        return bs.enumerated_power(grid, 0.85, 0.85)

    took = best(asymptotic, repeat=3)
    print(f"(11) MN enumeration at 200/group {took * 1e3:7.1f} ms; ratio {took:5.2f} of 1 s")
    took = best(unconditional, repeat=3)
    print(f"(11) exact unconditional at 100/group {took * 1e3:7.1f} ms; ratio {took:5.2f} of 1 s")


if __name__ == "__main__":
    import sys

    if sys.argv[1:] == [
        "search"
    ]:  # the n-search counts alone: python -m tests.bench.bench_engine search
        search_replicates()
        raise SystemExit
    main()
    exact_enumerations()
    memory()
    analytic()
    search_replicates()
    kernel_floors()
    interim_boundaries()
    score_enumeration()
