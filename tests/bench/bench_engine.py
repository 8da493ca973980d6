"""Engine benchmarks: run with ``python -m tests.bench.bench_engine``; prints ratios from one run.

Goals (not asserted: the machine is shared): (1) vectorized Welch ≥ 200× a per-replicate
scipy loop; (2) full Welch path ≤ 1.5× just drawing the data; (3) sufficient statistics ≥ 10×
the raw-data path; (4) a simulated solve (d = 0.5, 80%, ≥ 10,000 replicates) ≤ 0.3 s;
(5) peak memory of a large raw-data simulation ≤ 256 MB and flat in the replicate count.
"""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
from scipy import stats

from service.engine import simulate
from tests.engine.questions import make_q

N = 64  # per arm
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


def question(find: str, test: str, data: dict | None, replicates: int) -> dict:
    """A normalized two-means simulation question (Northbridge demo numbers: d = 0.5)."""
    simulation = {
        "replicates": replicates,
        "seed": 1,
        "test": test,
        "data": data,
        "chunk_size": 10000,
    }
    per_arm = [N, N] if find == "power" else None
    return make_q("two_means", find=find, simulation=simulation, per_arm=per_arm)


def chunk_time(test: str, data: dict | None, reps: int, *, sufficient: bool | None = None) -> float:
    """Best seconds for run_chunk over ``reps`` replicates of the given test and data."""
    plan = simulate.plan(question("power", test, data, reps), 0.05)
    if sufficient is not None:
        plan["sufficient"] = sufficient
    task = simulate.make_task(
        plan, [N, N], stream=0, chunk=0, chunk_size=reps, replicates=reps, seed=1
    )
    return best(lambda: simulate.run_chunk(dict(task)))


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

    for test in ("student_t", "welch_t"):
        t_raw = chunk_time(test, None, reps, sufficient=False) / reps
        t_suff = chunk_time(test, None, reps, sufficient=True) / reps
        print(
            f"(3) normal {test}: raw data {t_raw * 1e6:6.3f} µs/rep; sufficient statistics "
            f"{t_suff * 1e6:6.3f} µs/rep; speed-up {t_raw / t_suff:5.1f}× (goal ≥ 10×)"
        )

    q = question("sample_size", "student_t", None, 10000)
    q["simulation"]["chunk_size"] = 1000
    out = {}

    def solve():
        out.update(simulate.answer(q, 0.05, per_arm=None, start=None))

    t_solve = best(solve)
    print(
        f"(4) simulated solve d = 0.5, power .80, 10,000 replicates at the answer: {t_solve:.3f} s "
        f"(goal ≤ 0.3 s) → {out['per_arm']} per arm, power {out['power']['estimate']:.4f}, "
        f"{len(out['search']['candidates'])} search candidates"
    )


MEMORY_GOAL_MB = 256
BIG_N = 2000  # per arm


def peak_mb(q: dict) -> tuple[float, float]:
    """Return (peak traced MB, seconds) of one simulated answer; numpy reports to tracemalloc."""
    tracemalloc.start()
    tracemalloc.reset_peak()
    t0 = time.perf_counter()
    try:
        simulate.answer(q, 0.05, per_arm=q["sample_size"]["per_arm"])
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return peak / 2**20, time.perf_counter() - t0


def memory() -> None:
    """Print the peak memory of large raw-data simulations at two replicate counts."""
    cases = [
        ("two_means welch_t, lognormal raw data", "two_means", "welch_t", (20_000, 200_000)),
        # The rank-sum path assembles (rows, n) arrays and sorts them: the sub-batch cap matters.
        ("rank_sum, lognormal raw data", "rank_sum", "rank_sum", (2_000, 10_000)),
    ]
    for label, design, test, counts in cases:
        for reps in counts:
            simulation = {"replicates": reps, "seed": 1, "test": test, "data": LOGNORMAL}
            simulation["chunk_size"] = 10000
            q = make_q(design, per_arm=[BIG_N, BIG_N], simulation=simulation)
            mb, seconds = peak_mb(q)
            print(
                f"(5) {label}, n = {BIG_N:,} per arm, {reps:,} replicates: peak {mb:6.1f} MB, "
                f"{mb / MEMORY_GOAL_MB:5.3f} of the {MEMORY_GOAL_MB} MB goal ({seconds:.1f} s)"
            )


if __name__ == "__main__":
    main()
    memory()
