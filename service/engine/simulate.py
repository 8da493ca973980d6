"""Chunked, seeded Monte Carlo power: plan a question, run chunk tasks, search n, report.

A question becomes a *plan* (arms with and without the effect, the test, its rule). Work is cut
into chunk tasks — plain JSON dicts that ``run_chunk`` turns into a rejection count — so any
process may run any chunk. Digits depend only on the question, the seed and the chunk size:

* chunk ``i`` of stream ``s`` draws arm ``a``'s variate ``v`` from
  ``PCG64(SeedSequence(seed, spawn_key=(s, i, a, v, b)))``; raw observations come in column
  blocks ``b`` of 32, drawn row-major, so the first n columns are the same for every candidate
  n (common random numbers, nested samples) and rows may be drawn in any sub-batch size;
* stream 0 is the data model as posed, stream 1 the same model with the effect removed.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import optimize, special, stats

from . import direction, implied, models, search, vectests
from .designs import TESTS
from .errors import Cancelled, QuestionError
from .ledger import Ledger

BLOCK = 32
BIT_GENERATOR = "PCG64"
SEED_SCHEME = (
    "numpy PCG64 seeded by SeedSequence(seed, spawn_key=(stream, chunk, arm, variate, block)); "
    "stream 0 = data model as posed, 1 = effect removed; chunk i holds replicates "
    "[i*chunk_size, (i+1)*chunk_size); raw observations in column blocks of 32 (block 0 for "
    "sufficient statistics), each drawn row-major; arms in question order"
)
MEMORY_BYTES = 48 * 2**20  # working arrays per sub-batch; peak stays well under 256 MB
CACHE_ROWS = 4096  # raw sub-batches of a few MB stay in cache: measured ~10% faster than larger
STREAM_ALT, STREAM_NULL = 0, 1
_TWO_ARM = ("two_means", "two_proportions", "rank_sum", "survival_logrank")

Executor = Callable[[list[dict]], list[dict]]


# --- planning: the question as arms, a test and a rule ------------------------------------


def _hypothesis(q: dict, design: str, test: str) -> dict:
    """Return the test's rule (kind, sides, direction, margin) and check it fits the test."""
    hyp = q.get("hypothesis") or {"kind": "superiority", "margin": None, "higher_is_better": True}
    kind = hyp.get("kind", "superiority")
    sides = int(q.get("sides", 2))
    # One-sided: towards the assumed effect (direction.py); plan() re-aims it at the arms.
    better = 1 if hyp.get("higher_is_better", True) else -1
    aim = direction.one_sided(q, design) if sides == 1 else better
    rule = {"kind": kind, "sides": sides, "direction": aim, "margin": None}
    if kind != "superiority":
        allowed = {"two_means": ("student_t", "welch_t"), "two_proportions": ("z_test",)}
        if test not in allowed.get(design, ()):
            raise QuestionError(
                "simulation.test",
                f"{kind} is simulated only with the t tests (two_means) or z_test "
                f"(two_proportions); got test {test!r} for design {design!r}",
            )
        margin = hyp.get("margin")
        if margin is None:
            raise QuestionError("hypothesis.margin", f"is required for {kind}")
        rule.update(margin=float(margin), sides=1)
    if rule["sides"] not in (1, 2):
        raise QuestionError("sides", f"must be 1 or 2; got {rule['sides']!r}")
    return rule


def _effect(q: dict, name: str) -> float:
    value = (q.get("effect") or {}).get(name)
    if value is None:
        raise QuestionError(
            f"effect.{name}", "is required to build the simulated data (or give simulation.data)"
        )
    return float(value)


def _default_arms(q: dict, design: str) -> list[dict]:
    """Arms built from q["effect"] when no data model is posted (DEVELOPERS.md defaults)."""
    if design == "two_means":
        return [
            {"family": "normal", "mean": 0.0, "sd": _effect(q, "sd_control")},
            {
                "family": "normal",
                "mean": _effect(q, "difference"),
                "sd": _effect(q, "sd_treatment"),
            },
        ]
    if design == "one_mean":
        return [{"family": "normal", "mean": _effect(q, "difference"), "sd": _effect(q, "sd")}]
    if design == "paired_mean":
        return [
            {
                "family": "normal",
                "mean": _effect(q, "difference"),
                "sd": _effect(q, "sd_difference"),
            }
        ]
    if design == "two_proportions":
        return [
            {"family": "bernoulli", "p": _effect(q, "p_control")},
            {"family": "bernoulli", "p": _effect(q, "p_treatment")},
        ]
    if design == "anova_oneway":
        effect = q.get("effect") or {}
        if effect.get("group_means") is not None and effect.get("sd") is not None:
            return [
                {"family": "normal", "mean": float(m), "sd": float(effect["sd"])}
                for m in effect["group_means"]
            ]
        k, f = int(_effect(q, "groups")), _effect(q, "cohens_f")
        if k < 2:
            raise QuestionError("effect.groups", f"must be at least 2; got {k}")
        # Equally spaced means with SD (divisor k) equal to f and unit SD within groups; with
        # unequal posted sizes, f is size-weighted (as the analytic answer reads it).
        sizes = list((q.get("sample_size") or {}).get("per_arm") or [])
        if len(sizes) == k and len(set(sizes)) > 1:
            w = [float(n) / math.fsum(sizes) for n in sizes]
            center = math.fsum(wi * i for i, wi in enumerate(w))
            spread = math.sqrt(math.fsum(wi * (i - center) ** 2 for i, wi in enumerate(w)))
            return [
                {"family": "normal", "mean": f / spread * (i - center), "sd": 1.0} for i in range(k)
            ]
        step = f / math.sqrt((k * k - 1) / 12.0)
        return [{"family": "normal", "mean": step * (i - (k - 1) / 2), "sd": 1.0} for i in range(k)]
    if design == "rank_sum":
        p = _effect(q, "prob_superiority")
        if not 0 < p < 1:
            raise QuestionError("effect.prob_superiority", f"must be in (0, 1); got {p:g}")
        delta = math.sqrt(2.0) * float(special.ndtri(p))  # P(Y > X) = Φ(Δ/√2) for unit normals
        return [
            {"family": "normal", "mean": 0.0, "sd": 1.0},
            {"family": "normal", "mean": delta, "sd": 1.0},
        ]
    if design == "survival_logrank":
        lam, hr = _effect(q, "hazard_control"), _effect(q, "hazard_ratio")
        if lam <= 0 or hr <= 0:
            field = "effect.hazard_control" if lam <= 0 else "effect.hazard_ratio"
            raise QuestionError(field, f"must be > 0; got {min(lam, hr):g}")
        return [
            {"family": "exponential", "scale": 1.0 / lam},
            {"family": "exponential", "scale": 1.0 / (lam * hr)},
        ]
    raise QuestionError("design", f"no simulated data model for design {design!r}")


def _posted_arms(data: dict, design: str) -> list[dict]:
    """Arms from a posted data model, validated, in question order."""
    if not isinstance(data, dict):
        raise QuestionError("simulation.data", f"must be an object; got {data!r}")
    if design in _TWO_ARM:
        keys = ("control", "treatment")
    elif design in ("one_mean", "paired_mean"):
        keys = ("sample",)
    elif design == "anova_oneway":
        groups = data.get("groups")
        if set(data) != {"groups"} or not isinstance(groups, list) or len(groups) < 2:
            raise QuestionError(
                "simulation.data.groups", "must be the only key, a list of at least 2 arms"
            )
        return [models.check_arm(a, f"simulation.data.groups.{i}") for i, a in enumerate(groups)]
    else:
        raise QuestionError(
            "simulation.data",
            f"design {design!r} simulates bivariate normal pairs from effect.r; "
            "a posted data model is not accepted",
        )
    if set(data) != set(keys):
        raise QuestionError(
            "simulation.data",
            f"must have exactly the keys {', '.join(keys)}; got {', '.join(sorted(data))}",
        )
    return [models.check_arm(data[k], f"simulation.data.{k}") for k in keys]


def _labels(design: str, count: int) -> list[str]:
    if design in _TWO_ARM:
        return ["control", "treatment"]
    if design == "anova_oneway":
        return [f"group {i + 1}" for i in range(count)]
    return ["sample"]


def _null(design: str, test: str, arms: list[dict], rule: dict) -> tuple[list[dict], str]:
    """The same data model with the effect removed, and a sentence saying how it was removed."""
    kind, margin = rule["kind"], rule["margin"]
    if design == "two_proportions":
        p0 = arms[0]["p"] + (margin if kind != "superiority" else 0.0)
        if not 0 <= p0 <= 1:
            raise QuestionError(
                "hypothesis.margin",
                f"control p + margin = {p0:g} is not a probability; the null cannot be simulated",
            )
        how = (
            "treatment p set to control's"
            if kind == "superiority"
            else "treatment p set to control's plus the margin"
        )
        return [arms[0], {"family": "bernoulli", "p": p0}], f"{how} ({p0:g}); the null boundary"
    if design in ("rank_sum", "survival_logrank"):
        text = (
            "treatment drawn from the control distribution (P(Y > X) = 1/2)"
            if design == "rank_sum"
            else "treatment event times drawn from the control distribution (hazard ratio 1); "
            "accrual, follow-up and loss unchanged"
        )
        return [arms[0], dict(arms[0])], text
    if design in ("one_mean", "paired_mean"):
        return [
            models.shifted(arms[0], -models.center(arms[0]))
        ], "sample shifted to mean 0 (the null value), shape unchanged"
    if design == "anova_oneway":
        c0 = models.center(arms[0])
        return [
            models.shifted(a, c0 - models.center(a)) for a in arms
        ], "every group shifted to the first group's mean, shapes unchanged"
    if design == "two_means":
        target = models.center(arms[0]) + (margin if kind != "superiority" else 0.0)
        null = [arms[0], models.shifted(arms[1], target - models.center(arms[1]))]
        if kind == "superiority":
            text = "treatment shifted to the control mean (difference 0), shape unchanged"
        elif kind == "noninferiority":
            text = f"treatment shifted so the difference equals the margin ({margin:g}), the null boundary"
        else:
            text = f"treatment shifted so the difference equals the upper margin (+{margin:g}), a null boundary"
        return null, text
    raise QuestionError("design", f"no null model for design {design!r}")  # pragma: no cover


def plan(q: dict, alpha: float) -> dict:
    """Return the simulation plan of a normalized question: arms, null arms, test, rule, extras."""
    design = q.get("design")
    sim = q.get("simulation")
    if not isinstance(sim, dict):
        raise QuestionError("simulation", "is required when method is simulation")
    if design not in TESTS:
        raise QuestionError("design", f"unknown design {design!r}; allowed: {', '.join(TESTS)}")
    test = sim.get("test") or TESTS[design][0]
    if test not in TESTS[design]:
        raise QuestionError(
            "simulation.test",
            f"{test!r} is not offered for {design}; allowed: {', '.join(TESTS[design])}",
        )
    if not 0 < alpha < 1:
        raise QuestionError("alpha", f"must be in (0, 1); got {alpha!r}")
    rule = _hypothesis(q, design, test)
    extra: dict = {}
    if design == "correlation":
        if sim.get("data") is not None:
            _posted_arms(sim["data"], design)  # raises: no data model for correlation
        r, r0 = _effect(q, "r"), float((q.get("effect") or {}).get("r0") or 0.0)
        for name, v in (("r", r), ("r0", r0)):
            if not -1 < v < 1:
                raise QuestionError(f"effect.{name}", f"must be in (-1, 1); got {v:g}")
        if rule["sides"] == 1:
            rule["direction"] = direction.one_sided(q, design, r - r0)
        arms = [{"family": "bivariate_normal", "r": r}]
        null = [{"family": "bivariate_normal", "r": r0}]
        extra = {"r0": r0}
        return {
            "design": design,
            "test": test,
            "rule": rule,
            "alpha": alpha,
            "arms": arms,
            "null": null,
            "null_model": f"correlation set to r0 = {r0:g}",
            "extra": extra,
            "sufficient": True,
            "labels": ["pairs"],
            "weights": [1.0],
            "min_size": 4,
            "data": {"pairs": {"family": "bivariate_normal", "r": r}},
        }
    posted = sim.get("data")
    arms = _posted_arms(posted, design) if posted is not None else _default_arms(q, design)
    arms = [
        models.check_arm(a, f"simulation.data.{lab}")
        for a, lab in zip(arms, _labels(design, len(arms)), strict=True)
    ]
    labels = _labels(design, len(arms))
    if design == "two_proportions":
        for a, lab in zip(arms, labels, strict=True):
            if a["family"] != "bernoulli":
                raise QuestionError(
                    f"simulation.data.{lab}.family",
                    f"two_proportions needs bernoulli arms; got {a['family']!r}",
                )
        extra = {"continuity": bool((q.get("effect") or {}).get("continuity_correction", False))}
    if design == "survival_logrank":
        for a, lab in zip(arms, labels, strict=True):
            if a["family"] not in models.POSITIVE:
                raise QuestionError(
                    f"simulation.data.{lab}.family",
                    f"event times need a positive family ({', '.join(sorted(models.POSITIVE))}); got {a['family']!r}",
                )
        a, f = _effect(q, "accrual_period"), _effect(q, "follow_up")
        loss = float((q.get("effect") or {}).get("loss_rate") or 0.0)
        if a < 0 or f < 0 or a + f <= 0:
            raise QuestionError(
                "effect.follow_up",
                f"accrual_period + follow_up must be > 0 with both ≥ 0; got {a:g} and {f:g}",
            )
        if loss < 0:
            raise QuestionError("effect.loss_rate", f"must be ≥ 0; got {loss:g}")
        extra = {"accrual_period": a, "follow_up": f, "loss_rate": loss}
    if rule["sides"] == 1 and rule["kind"] == "superiority":
        # Towards the effect the simulated arms imply (the posted data model, if any).
        aim = direction.one_sided(q, design, direction.implied(design, arms))
        # The log-rank z is negative when treatment has fewer events: longer times.
        rule["direction"] = -aim if design == "survival_logrank" else aim
    cl = _cluster_extra(q, design, arms, labels)
    if cl is not None:
        extra = dict(extra, cluster=cl)
    null, null_text = _null(design, test, arms, rule)
    normal = all(a["family"] == "normal" for a in arms) and cl is None
    sufficient = design == "two_proportions" or (
        normal and test in ("student_t", "welch_t", "f_test")
    )
    if design == "anova_oneway":
        weights = [1.0] * len(arms)
    elif design in _TWO_ARM:
        ratio = float(q.get("allocation_ratio") or 1.0)
        if ratio <= 0:
            raise QuestionError("allocation_ratio", f"must be > 0; got {ratio:g}")
        weights = [1.0, ratio]
    else:
        weights = [1.0]
    data = {lab: models.public(a) for lab, a in zip(labels, arms, strict=True)}
    if design == "anova_oneway":
        data = {"groups": [models.public(a) for a in arms]}
    if design == "survival_logrank":
        data = dict(data, **extra)
    return {
        "design": design,
        "test": test,
        "rule": rule,
        "alpha": alpha,
        "arms": arms,
        "null": null,
        "null_model": null_text,
        "extra": extra,
        "sufficient": sufficient,
        "labels": labels,
        "weights": weights,
        "min_size": 2,
        "data": data,
    }


def _cluster_extra(q: dict, design: str, arms: list[dict], labels: list[str]) -> dict | None:
    """The cluster settings a chunk needs (analysed mean size, cv, ICC), or None.

    With clusters, per_arm counts clusters and the test is the cluster-level t (cluster_sim).
    """
    adj = q.get("adjustments") or {}
    c = adj.get("cluster")
    if not c:
        return None
    want = "normal" if design == "two_means" else "bernoulli"
    for a, lab in zip(arms, labels, strict=True):
        if a["family"] != want:
            raise QuestionError(
                f"simulation.data.{lab}.family",
                f"cluster trials are simulated with {want} outcomes; got {a['family']!r}",
            )
    keep = 1.0 - float(adj.get("dropout") or 0.0)
    return {
        "mean_size": float(c["mean_size"]) * keep,
        "cv": float(c.get("cv") or 0.0),
        "icc": float(c["icc"]),
    }


def per_arm_for(plan_: dict, m: int) -> list[int]:
    """Return the per-arm sizes when the first arm has ``m`` (others by the allocation, rounded up)."""
    w = plan_["weights"]
    return [m] + [max(1, math.ceil(m * wi / w[0] - 1e-9)) for wi in w[1:]]


def _m_min(plan_: dict) -> int:
    m = plan_["min_size"]
    while min(per_arm_for(plan_, m)) < plan_["min_size"]:
        m += 1
    return m


# --- chunk tasks ---------------------------------------------------------------------------


def make_task(
    plan_: dict,
    per_arm: list[int],
    *,
    stream: int,
    chunk: int,
    chunk_size: int,
    replicates: int,
    seed: int,
) -> dict:
    """Return the JSON task for one chunk: everything ``run_chunk`` needs, nothing else."""
    return {
        "design": plan_["design"],
        "test": plan_["test"],
        "arms": plan_["arms"] if stream == STREAM_ALT else plan_["null"],
        "per_arm": [int(n) for n in per_arm],
        "alpha": plan_["alpha"],
        "rule": plan_["rule"],
        "extra": plan_["extra"],
        "sufficient": plan_["sufficient"],
        "seed": int(seed),
        "stream": int(stream),
        "chunk": int(chunk),
        "chunk_size": int(chunk_size),
        "replicates": int(replicates),
    }


class _Streams:
    """The generators of one (seed, stream, chunk), created on first use and kept for the chunk."""

    def __init__(self, seed: int, stream: int, chunk: int):
        self.key = (seed, stream, chunk)
        self.gens: dict[tuple[int, int, int], np.random.Generator] = {}

    def gen(self, arm: int, variate: int, block: int = 0) -> np.random.Generator:
        """Return the generator of (arm, variate, block)."""
        k = (arm, variate, block)
        g = self.gens.get(k)
        if g is None:
            seed, stream, chunk = self.key
            ss = np.random.SeedSequence(seed, spawn_key=(stream, chunk, arm, variate, block))
            g = self.gens[k] = np.random.Generator(np.random.PCG64(ss))
        return g

    def raw(self, index: int, arm: dict, n: int, rows: int, variate0: int = 0) -> np.ndarray:
        """Return the next ``rows`` replicates of n raw observations of ``arm``, shape (rows, n)."""
        k = models.variates(arm)
        blocks = -(-n // BLOCK)
        if blocks == 1 and n == BLOCK:
            return models.sample(
                arm, [self.gen(index, variate0 + v, 0) for v in range(k)], (rows, BLOCK)
            )
        out = np.empty((rows, n))
        for b in range(blocks):
            part = models.sample(
                arm, [self.gen(index, variate0 + v, b) for v in range(k)], (rows, BLOCK)
            )
            width = min(BLOCK, n - b * BLOCK)
            out[:, b * BLOCK : b * BLOCK + width] = part[:, :width]
        return out

    def raw_moments(self, index: int, arm: dict, n: int, rows: int, center: float = 0.0):
        """Return per-row (mean, variance) of the same raw data as ``raw``, block by block.

        Summing each block as drawn avoids assembling the (rows, n) array; ``center`` is
        subtracted first when the mean dwarfs the spread (see vectests.row_moments).
        """
        k = models.variates(arm)
        s = np.zeros(rows)
        ss = np.zeros(rows)
        for b in range(-(-n // BLOCK)):
            part = models.sample(arm, [self.gen(index, v, b) for v in range(k)], (rows, BLOCK))
            width = min(BLOCK, n - b * BLOCK)
            if width < BLOCK:
                part = part[:, :width]
            if center:
                part = part - center
            s += part.sum(axis=1)
            ss += np.einsum("ij,ij->i", part, part)
        mean = s / n
        var = (ss - s * mean) / (n - 1)
        np.maximum(var, 0.0, out=var)
        if center:
            mean += center
        return mean, var

    def normal_summary(self, index: int, arm: dict, n: int, rows: int):
        """Return (sample means, sample variances) of n normal draws without drawing them."""
        sd = arm["sd"]
        mean = self.gen(index, 0).standard_normal(rows)
        mean *= sd / math.sqrt(n)
        mean += arm["mean"] + arm.get("shift", 0.0)
        var = self.gen(index, 1).standard_gamma((n - 1) / 2.0, rows)  # χ²(n−1)/2
        var *= 2.0 * sd * sd / (n - 1)
        return mean, var

    def binomial(self, index: int, p: float, n: int, rows: int) -> np.ndarray:
        """Return binomial(n, p) counts by inverting one uniform each (monotone in n: common numbers)."""
        u = self.gen(index, 0).random(rows)
        np.subtract(1.0, u, out=u)  # (0, 1]: ppf(0) would fall below the support
        return vectests.binomial_quantile(u, n, p)  # = stats.binom.ppf(u, n, p), digit for digit

    def correlation(self, r: float, n: int, rows: int) -> np.ndarray:
        """Return sample correlations of n bivariate normal pairs via Bartlett's decomposition."""
        c1 = np.sqrt(2.0 * self.gen(0, 0).standard_gamma((n - 1) / 2.0, rows))
        c2sq = 2.0 * self.gen(0, 1).standard_gamma((n - 2) / 2.0, rows)
        z = self.gen(0, 2).standard_normal(rows)
        s = math.sqrt(1.0 - r * r)
        a = r * c1 + s * z
        return a / np.sqrt(a * a + s * s * c2sq)


def _center(arm: dict) -> float:
    """A centring constant for one-pass moments when the mean dwarfs the spread, else 0."""
    m, v = models.moments(arm)
    if m is None or v is None or v <= 0 or abs(m) < 100 * math.sqrt(v):
        return 0.0
    return m


def _moments(streams: _Streams, task: dict, i: int, rows: int):
    arm, n = task["arms"][i], task["per_arm"][i]
    if task["sufficient"]:
        return streams.normal_summary(i, arm, n, rows)
    return streams.raw_moments(i, arm, n, rows, _center(arm))


def _survival_rows(streams: _Streams, task: dict, rows: int):
    extra = task["extra"]
    a, f, loss = extra["accrual_period"], extra["follow_up"], extra["loss_rate"]
    times, events = [], []
    for i, (arm, n) in enumerate(zip(task["arms"], task["per_arm"], strict=True)):
        t = streams.raw(i, arm, n, rows, variate0=0)
        if a > 0:
            entry = streams.raw(
                i, {"family": "uniform", "low": 0.0, "high": a}, n, rows, variate0=1
            )
            stop = (a + f) - entry
        else:
            stop = np.full((rows, n), f)
        if loss > 0:
            np.minimum(
                stop,
                streams.raw(i, {"family": "exponential", "scale": 1.0 / loss}, n, rows, variate0=2),
                out=stop,
            )
        events.append(t <= stop)
        times.append(np.minimum(t, stop))
    return np.concatenate(times, axis=1), np.concatenate(events, axis=1)


def _reject(streams: _Streams, task: dict, rows: int) -> tuple[np.ndarray, dict]:
    """Return the reject decisions of ``rows`` replicates (and small extras, e.g. event counts)."""
    design, test, alpha, rule = task["design"], task["test"], task["alpha"], task["rule"]
    arms, per_arm = task["arms"], task["per_arm"]
    if task["extra"].get("cluster"):
        from . import cluster_sim

        return cluster_sim.reject(streams, task, rows)
    if design == "correlation":
        r = streams.correlation(arms[0]["r"], per_arm[0], rows)
        return vectests.correlation_reject(r, per_arm[0], task["extra"]["r0"], alpha, rule), {}
    if design == "two_proportions":
        (n1, n2) = per_arm
        c1 = streams.binomial(0, arms[0]["p"], n1, rows)
        c2 = streams.binomial(1, arms[1]["p"], n2, rows)
        if test == "fisher_exact":
            return vectests.fisher_reject(c1, n1, c2, n2, alpha, rule), {}
        pooled = rule["kind"] == "superiority"
        est, se = vectests.two_proportion_z(
            c1, n1, c2, n2, pooled=pooled, continuity=task["extra"].get("continuity", False)
        )
        return vectests.decide(est, se, None, alpha, rule), {}
    if design == "survival_logrank":
        time, event = _survival_rows(streams, task, rows)
        z = vectests.logrank_z(time, event, per_arm[0])
        return vectests.decide(z, 1.0, None, alpha, rule), {"events": int(event.sum())}
    if test in ("student_t", "welch_t") and design == "two_means":
        m1, v1 = _moments(streams, task, 0, rows)
        m2, v2 = _moments(streams, task, 1, rows)
        est, se, df = vectests.two_sample_t(
            m1, v1, per_arm[0], m2, v2, per_arm[1], equal_var=test == "student_t"
        )
        return vectests.decide(est, se, df, alpha, rule), {}
    if test == "student_t":  # one_mean, paired_mean
        m, v = _moments(streams, task, 0, rows)
        est, se, df = vectests.one_sample_t(m, v, per_arm[0])
        return vectests.decide(est, se, df, alpha, rule), {}
    if test == "rank_sum":
        x = streams.raw(0, arms[0], per_arm[0], rows)
        y = streams.raw(1, arms[1], per_arm[1], rows)
        return vectests.decide(vectests.rank_sum_z(x, y), 1.0, None, alpha, rule), {}
    if test == "signed_rank":
        d = streams.raw(0, arms[0], per_arm[0], rows)
        return vectests.decide(vectests.signed_rank_z(d), 1.0, None, alpha, rule), {}
    if test == "f_test":
        summaries = [_moments(streams, task, i, rows) for i in range(len(arms))]
        f = vectests.f_oneway(per_arm, [s[0] for s in summaries], [s[1] for s in summaries])
        crit = vectests.f_critical(alpha, len(arms) - 1, sum(per_arm) - len(arms))
        return f > crit, {}
    if test == "kruskal_wallis":
        groups = [
            streams.raw(i, a, n, rows) for i, (a, n) in enumerate(zip(arms, per_arm, strict=True))
        ]
        return vectests.kruskal_h(groups) > vectests.chi2_critical(alpha, len(arms) - 1), {}
    raise QuestionError("simulation.test", f"test {test!r} is not available for design {design!r}")


def _row_bytes(task: dict) -> int:
    """Bytes of working memory one replicate needs (raw data, sort order, ranks, masks)."""
    if task["sufficient"]:
        return 8 * 12
    total = sum(-(-n // BLOCK) * BLOCK for n in task["per_arm"])
    factor = 4 if task["test"] in ("student_t", "welch_t", "f_test") else 10
    if task["design"] == "survival_logrank":
        factor = 14
    return 8 * total * factor


def run_chunk(task: dict) -> dict:
    """Run one chunk task and return {"rejections", "replicates"} (plus "events" for survival).

    Pure: the result depends only on the task. Rows are drawn in sub-batches that keep working
    memory bounded; because each generator is consumed row by row, the sub-batch size (the
    optional ``max_rows``) does not change the digits.
    """
    for key in (
        "design",
        "test",
        "arms",
        "per_arm",
        "alpha",
        "rule",
        "seed",
        "stream",
        "chunk",
        "replicates",
    ):
        if key not in task:
            raise QuestionError(f"task.{key}", "is required in a simulation chunk task")
    total = int(task["replicates"])
    if total < 1:
        raise QuestionError("task.replicates", f"must be ≥ 1; got {total}")
    task.setdefault("extra", {})
    task.setdefault("sufficient", False)
    max_rows = int(task.get("max_rows") or max(1, MEMORY_BYTES // _row_bytes(task)))
    if not task["sufficient"] and not task.get("max_rows"):
        max_rows = min(max_rows, CACHE_ROWS)
    streams = _Streams(int(task["seed"]), int(task["stream"]), int(task["chunk"]))
    rejections, done, extras = 0, 0, {}
    while done < total:
        rows = min(max_rows, total - done)
        reject, extra = _reject(streams, task, rows)
        rejections += int(np.count_nonzero(reject))
        for k, v in extra.items():
            extras[k] = extras.get(k, 0) + v
        done += rows
    return {"rejections": rejections, "replicates": total, **extras}


# --- starting points and cost ----------------------------------------------------------------


def _z(p: float) -> float:
    return float(special.ndtri(p))


def approximate_m(plan_: dict, target: float) -> float | None:
    """Return a normal-approximation size of the first arm reaching ``target``, or None."""
    design, rule, alpha, arms = plan_["design"], plan_["rule"], plan_["alpha"], plan_["arms"]
    cl = plan_["extra"].get("cluster")
    if cl:  # individuals × design effect ÷ analysed cluster size = clusters
        extra = {k: v for k, v in plan_["extra"].items() if k != "cluster"}
        n = approximate_m(dict(plan_, extra=extra), target)
        de = 1.0 + ((cl["cv"] ** 2 + 1.0) * cl["mean_size"] - 1.0) * cl["icc"]
        return None if n is None else max(2.0, n * de / cl["mean_size"])
    w = plan_["weights"]
    ratio = w[1] / w[0] if len(w) == 2 else 1.0
    kind = rule["kind"]
    za = _z(1 - alpha / 2) if (kind == "superiority" and rule["sides"] == 2) else _z(1 - alpha)
    zb = _z(target)
    if design == "correlation":
        r, r0 = arms[0]["r"], plan_["extra"]["r0"]
        gap = abs(math.atanh(r) - math.atanh(r0))
        return ((za + zb) / gap) ** 2 + 3 if gap > 0 else None
    if design == "survival_logrank":
        ex = plan_["extra"]
        hazards = [1.0 / models.center(a) for a in arms]
        hr = hazards[1] / hazards[0]
        if hr == 1:
            return None

        def p_event(lam: float) -> float:
            mu = ex["loss_rate"]
            t = lam + mu
            a, f = ex["accrual_period"], ex["follow_up"]
            stay = (
                math.exp(-t * f)
                if a == 0
                else (math.exp(-t * f) - math.exp(-t * (a + f))) / (t * a)
            )
            return lam / t * (1 - stay)

        events = (za + zb) ** 2 * (1 + ratio) ** 2 / (ratio * math.log(hr) ** 2)
        return events / (p_event(hazards[0]) + ratio * p_event(hazards[1]))
    if design == "two_proportions":
        p1, p2 = arms[0]["p"], arms[1]["p"]
        if kind == "superiority":
            gap = abs(p2 - p1)
            pbar = (p1 + ratio * p2) / (1 + ratio)
            num = za * math.sqrt(pbar * (1 - pbar) * (1 + 1 / ratio)) + zb * math.sqrt(
                p1 * (1 - p1) + p2 * (1 - p2) / ratio
            )
            return (num / gap) ** 2 if gap > 0 else None
        var = p1 * (1 - p1) + p2 * (1 - p2) / ratio
        return _shifted_n(p2 - p1, var, rule, za, zb, target)
    if plan_["test"] == "rank_sum" and len(arms) == 2:
        # Noether (1987): N = (za + zb)² / (12·c·(1 − c)·(P(Y > X) − ½)²), c the control share;
        # P(Y > X) comes from the data model itself, so skewed or heavy-tailed arms start well.
        p_sup = implied.prob_superiority(arms[0], arms[1])
        c = 1.0 / (1.0 + ratio)
        if abs(p_sup - 0.5) < 1e-12:
            return None
        return c * (za + zb) ** 2 / (12 * c * (1 - c) * (p_sup - 0.5) ** 2)
    mv = [models.moments(a) for a in arms]
    if any(m is None or v is None for m, v in mv):
        return None
    are = 3 / math.pi if plan_["test"] in ("rank_sum", "signed_rank", "kruskal_wallis") else 1.0
    if design == "anova_oneway":
        means = np.array([m for m, _ in mv])
        f2 = float(means.var()) / float(np.mean([v for _, v in mv]))
        if f2 <= 0:
            return None
        k = len(arms)
        crit = stats.chi2.isf(alpha, k - 1)
        lam = optimize.brentq(lambda x: stats.ncx2.sf(crit, k - 1, x) - target, 1e-6, 1e7)
        return lam / (k * f2) / are
    if design in ("one_mean", "paired_mean"):
        m, v = mv[0]
        return ((za + zb) ** 2 * v / (m * m) + 1) / are if m != 0 else None
    (m1, v1), (m2, v2) = mv
    var = v1 + v2 / ratio
    if kind == "superiority":
        gap = abs(m2 - m1)
        return (za + zb) ** 2 * var / gap**2 / are + 1 if gap > 0 else None
    n = _shifted_n(m2 - m1, var, rule, za, zb, target)
    return None if n is None else n + 1


def _shifted_n(diff: float, var: float, rule: dict, za: float, zb: float, target: float):
    """Normal-approximation n for a non-inferiority or TOST test of a difference."""
    margin = rule["margin"]
    if rule["kind"] == "noninferiority":
        gap = rule["direction"] * (diff - margin)
    else:
        gap = margin - abs(diff)
        if diff == 0:
            zb = _z((1 + target) / 2)
    return (za + zb) ** 2 * var / gap**2 if gap > 0 else None


def _draws_per_replicate(plan_: dict, per_arm: list[int]) -> int:
    if plan_["extra"].get("cluster"):  # per_arm counts clusters: size, cluster effect, mean
        return 3 * sum(per_arm)
    if plan_["design"] == "correlation":
        return 3
    if plan_["design"] == "two_proportions":
        return len(per_arm)
    if plan_["sufficient"]:
        return 2 * len(per_arm)
    per_obs = [models.variates(a) for a in plan_["arms"]]
    if plan_["design"] == "survival_logrank":
        ex = plan_["extra"]
        per_obs = [1 + (ex["accrual_period"] > 0) + (ex["loss_rate"] > 0)] * len(per_arm)
    return sum(-(-n // BLOCK) * BLOCK * k for n, k in zip(per_arm, per_obs, strict=True))


_FALLBACK_M = 50  # first-arm size tried when no approximation exists (e.g. Cauchy data)
_COST_SPAN = 1.5  # the estimate assumes candidates within 1.5× the start


def _alpha_of(q: dict) -> float:
    k = int(((q.get("adjustments") or {}).get("comparisons")) or 1)
    return float(q.get("alpha", 0.05)) / k


def estimate_cost(q: dict) -> int:
    """Return an upper estimate of random draws: replicates × draws per replicate × candidates.

    For a sample-size search it assumes at most 15 search candidates and four full runs
    (confirmation at n and n − 1, one move, the type I check), all within 1.5× the start; an
    effect search, 15 candidates and four full runs at the posted n.
    """
    sim = q["simulation"]
    reps = int(sim.get("replicates", 10000))
    if q.get("find") == "effect":
        name, axis = _effect_setup(q)
        x = 1.0 if not math.isfinite(axis["x_max"]) else axis["x_max"] / 2
        p = plan(_with_effect(q, name, axis["origin"] + axis["sign"] * x), _alpha_of(q))
        per_arm = list((q.get("sample_size") or {}).get("per_arm") or [])
        search_reps = min(int(sim.get("search_replicates", 2000)), reps)
        return (search.MAX_CANDIDATES * search_reps + 4 * reps) * _draws_per_replicate(p, per_arm)
    p = plan(q, _alpha_of(q))
    if q.get("find") == "power":
        per_arm = list((q.get("sample_size") or {}).get("per_arm") or [])
        cl = (q.get("adjustments") or {}).get("cluster")
        if cl and cl.get("mean_size"):  # enrolled people → clusters
            per_arm = [math.ceil(n / float(cl["mean_size"])) for n in per_arm]
        return 2 * reps * _draws_per_replicate(p, per_arm)
    m0 = approximate_m(p, float(q.get("target_power") or 0.8)) or _FALLBACK_M
    per_arm = per_arm_for(p, max(_m_min(p), math.ceil(_COST_SPAN * m0)))
    search_reps = min(int(sim.get("search_replicates", 2000)), reps)
    return (search.MAX_CANDIDATES * search_reps + 4 * reps) * _draws_per_replicate(p, per_arm)


# --- running batches -------------------------------------------------------------------------


class _Runner:
    """Turns (stream, per_arm, replicates) requests into chunk batches and caches chunk results."""

    def __init__(
        self, plan_, seed, chunk_size, executor, progress, cancel, planned, *, full=0, budget=None
    ):
        self.plan, self.seed, self.chunk_size = plan_, seed, chunk_size
        self.executor, self.progress, self.cancel = executor, progress, cancel
        self.planned, self.done, self.reported = max(planned, 1), 0, 0.0
        self.cache: dict[tuple, dict] = {}
        self.full = full  # the full replicate count, to label runs in the ledger
        self.ledger = Ledger(
            budget, lambda t: t["replicates"] * _draws_per_replicate(t, t["per_arm"])
        )

    def _tasks(
        self, stream: int, per_arm: list[int], reps: int, plan_: dict | None = None, tag=None
    ) -> list[tuple[tuple, dict]]:
        # ``plan_`` and its ``tag`` let one runner (one cache) serve plans that differ in the
        # effect, as the effect search needs; the tag keeps their chunks apart in the cache.
        out = []
        for chunk in range(-(-reps // self.chunk_size)):
            size = min(self.chunk_size, reps - chunk * self.chunk_size)
            key = (stream, tuple(per_arm), chunk, size, tag)
            task = make_task(
                plan_ or self.plan,
                per_arm,
                stream=stream,
                chunk=chunk,
                chunk_size=self.chunk_size,
                replicates=size,
                seed=self.seed,
            )
            out.append((key, task))
        return out

    def batch(self, requests: list[tuple]) -> list[search.Estimate]:
        """Run every missing chunk of ``requests`` in one executor batch; return their estimates.

        A request is (stream, per_arm, replicates) or (stream, per_arm, replicates, plan, tag).
        """
        wanted = [self._tasks(*r) for r in requests]
        todo: dict[tuple, dict] = {}
        labels: dict[tuple, str] = {}
        for request, ks in zip(requests, wanted, strict=True):
            for key, task in ks:
                if key not in self.cache and key not in todo:
                    todo[key] = task
                    labels[key] = _label(request[0], request[2], self.full)
        if todo:
            keys, tasks = list(todo), list(todo.values())
            self.ledger.charge(tasks, [labels[k] for k in keys])
            results = self._run(tasks)
            if len(results) != len(tasks):
                raise QuestionError(
                    "simulation", "the executor returned a different number of results"
                )
            self.cache.update(zip(keys, results, strict=True))
        out = []
        for ks in wanted:
            rej = sum(int(self.cache[k]["rejections"]) for k, _ in ks)
            reps = sum(int(self.cache[k]["replicates"]) for k, _ in ks)
            out.append(search.Estimate(rej, reps))
        return out

    def extra_sum(self, name: str, *request) -> int:
        """Return the sum of a chunk extra (e.g. events) over the chunks of one request."""
        return sum(int(self.cache[k].get(name, 0)) for k, _ in self._tasks(*request))

    def _tick(self, reps: int) -> None:
        self.done += reps
        if self.progress is not None:
            f = min(0.99, self.done / self.planned)
            if f > self.reported:
                self.reported = f
                self.progress(f)

    def _check_cancel(self) -> None:
        if self.cancel is not None and self.cancel():
            raise Cancelled("cancelled between simulation chunks")

    def _run(self, tasks: list[dict]) -> list[dict]:
        if self.executor is None:
            results = []
            for task in tasks:
                self._check_cancel()
                results.append(run_chunk(task))
                self._tick(task["replicates"])
            return results
        self._check_cancel()
        results = list(self.executor(tasks))
        self._tick(sum(t["replicates"] for t in tasks))
        return results


def _label(stream: int, reps: int, full: int) -> str:
    """The ledger's kind of run: the type I check, a full-replicate run or a search candidate."""
    if stream == STREAM_NULL:
        return "null"
    return "full" if reps >= full else "search"


# --- the simulated answer ------------------------------------------------------------------


def _estimate_block(est: search.Estimate) -> dict:
    return {"estimate": est.power, "mcse": est.mcse, "ci95": est.ci95, "replicates": est.replicates}


def _describe(plan_: dict) -> str:
    test = plan_["test"].replace("_", " ")
    cl = plan_["extra"].get("cluster")
    if cl:
        outcome = (
            "beta-binomial counts (cluster probabilities from a beta distribution with "
            "intra-cluster correlation ICC)"
            if plan_["design"] == "two_proportions"
            else "normal cluster means (cluster effect N(0, ICC·σ²) plus the mean of the "
            "individual errors N(0, (1 − ICC)·σ²))"
        )
        sizes = (
            f"sizes drawn from a gamma distribution with mean {cl['mean_size']:g} and "
            f"coefficient of variation {cl['cv']:g}, rounded to whole people (at least 1)"
            if cl["cv"] > 0
            else f"{max(1, round(cl['mean_size']))} people each"
        )
        return (
            f"Each replicate draws every cluster of every arm ({sizes}) with {outcome}, ICC "
            f"{cl['icc']:g}, and applies the cluster-level t test (arm means weighted by cluster "
            "size, pooled between-cluster standard error, clusters − 2 degrees of freedom) at "
            "the stated alpha; sample sizes count clusters per arm. Power is the share of "
            "replicates that reject, with its Monte Carlo standard error and Wilson interval."
        )
    if plan_["design"] == "correlation":
        how = "draws each replicate's sample correlation directly (Bartlett's decomposition of the bivariate normal scatter matrix)"
    elif plan_["design"] == "two_proportions":
        how = "draws each arm's success count directly (binomial, by inverting one uniform per arm)"
    elif plan_["sufficient"]:
        how = "draws each arm's sample mean and variance directly (normal mean, scaled chi-square variance)"
    else:
        how = "draws every observation of every arm from the data model"
    return (
        f"Each replicate {how} and applies the {test} test at the stated alpha; power is the "
        "share of replicates that reject, with its Monte Carlo standard error and Wilson interval."
    )


def _settings(q: dict) -> tuple[int, int, int, int, str]:
    """Return (seed, replicates, chunk size, search replicates, decision rule), checked."""
    sim = q["simulation"]
    seed = sim.get("seed")
    if seed is None or isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed < 2**53:
        raise QuestionError("simulation.seed", f"must be an integer in [0, 2**53); got {seed!r}")
    reps = int(sim.get("replicates", 10000))
    chunk_size = int(sim.get("chunk_size", 1000))
    search_reps = min(int(sim.get("search_replicates", 2000)), reps)
    rule_name = sim.get("decision_rule", "point")
    for field, value, low in (
        ("replicates", reps, 1),
        ("chunk_size", chunk_size, 1),
        ("search_replicates", search_reps, 1),
    ):
        if value < low:
            raise QuestionError(f"simulation.{field}", f"must be ≥ {low}; got {value}")
    if rule_name not in ("point", "lower_bound"):
        raise QuestionError(
            "simulation.decision_rule", f"must be 'point' or 'lower_bound'; got {rule_name!r}"
        )
    return seed, reps, chunk_size, search_reps, rule_name


def _check_per_arm(p: dict, per_arm: list[int] | None, what: str) -> list[int]:
    if per_arm is None:
        raise QuestionError("sample_size.per_arm", f"is required to simulate {what}")
    n_arms = len(p["weights"])
    if len(per_arm) != n_arms or any(int(n) < p["min_size"] for n in per_arm):
        raise QuestionError(
            "sample_size.per_arm",
            f"needs {n_arms} sizes of at least {p['min_size']} for {p['design']} with {p['test']}; got {per_arm!r}",
        )
    return [int(n) for n in per_arm]


def _target(q: dict, what: str) -> float:
    target = q.get("target_power")
    if target is None or not 0 < float(target) < 1:
        raise QuestionError(
            "target_power", f"must be in (0, 1) to search for {what}; got {target!r}"
        )
    return float(target)


def answer(
    q: dict,
    alpha: float,
    *,
    per_arm: list[int] | None = None,
    start: list[float] | None = None,
    executor: Executor | None = None,
    progress: Callable[[float], None] | None = None,
    cancel: Callable[[], bool] | None = None,
    budget: int | None = None,
) -> dict:
    """Return the simulated answer of a normalized question (per arm, power, type I error, search).

    ``find`` may be ``power``, ``sample_size`` (the n search) or ``effect`` (the smallest effect
    reaching the target power at ``per_arm``, for arms built from the effect fields).
    ``budget`` (random draws) is enforced on the draws actually made, batch by batch.

    Examples
    --------
    >>> q = {"design": "two_means", "find": "power", "sides": 2, "target_power": None,
    ...      "allocation_ratio": 1.0, "sample_size": {"per_arm": [30, 30]},
    ...      "effect": {"difference": 0.5, "sd_control": 1.0, "sd_treatment": 1.0},
    ...      "hypothesis": {"kind": "superiority", "margin": None, "higher_is_better": True},
    ...      "simulation": {"replicates": 2000, "seed": 7, "test": "student_t", "data": None,
    ...                     "decision_rule": "point", "chunk_size": 1000, "search_replicates": 2000}}
    >>> round(answer(q, 0.05, per_arm=[30, 30])["power"]["estimate"], 1)
    0.5
    """
    find = q.get("find")
    if find == "effect":
        return _answer_effect(q, alpha, per_arm, executor, progress, cancel, budget)
    p = plan(q, alpha)
    seed, reps, chunk_size, search_reps, rule_name = _settings(q)
    warnings: list[str] = []
    search_block = None
    if find == "power":
        final = _check_per_arm(p, per_arm, "power")
        runner = _Runner(
            p, seed, chunk_size, executor, progress, cancel, 2 * reps, full=reps, budget=budget
        )
        alt, null = runner.batch([(STREAM_ALT, final, reps), (STREAM_NULL, final, reps)])
    elif find == "sample_size":
        target = _target(q, "n")
        if per_arm:  # a posted per-arm shape sets the allocation
            p["weights"] = [float(n) for n in per_arm]
        m0, source = _start(q, p, alpha, start, target)
        if source == "default":
            warnings.append(
                f"no analytic approximation for this data model; the search started at {m0:g} in the first arm"
            )
        m_min = _m_min(p)
        runner = _Runner(
            p,
            seed,
            chunk_size,
            executor,
            progress,
            cancel,
            5 * search_reps + 4 * reps,
            full=reps,
            budget=budget,
        )

        def evaluate(ms: list[int], r: int, null_at: int | None) -> list[search.Estimate]:
            requests = [(STREAM_ALT, per_arm_for(p, m), r) for m in ms]
            if null_at is not None:
                requests.append((STREAM_NULL, per_arm_for(p, null_at), reps))
            got = runner.batch(requests)
            return got[: len(ms)]

        found = search.smallest_n(
            evaluate,
            start=m0,
            m_min=m_min,
            m_max=max(1000, int(50 * m0)),
            target=target,
            rule=rule_name,
            search_replicates=search_reps,
            replicates=reps,
        )
        warnings.extend(found.warnings)
        final = per_arm_for(p, found.m)
        alt, null = runner.batch([(STREAM_ALT, final, reps), (STREAM_NULL, final, reps)])
        search_block = {
            "start": [float(x) for x in (start or [])] or per_arm_for(p, math.ceil(m0)),
            "start_source": source,
            "target": target,
            "decision_rule": rule_name,
            "search_replicates": search_reps,
            "candidates": [
                {
                    "per_arm": per_arm_for(p, m),
                    "replicates": e.replicates,
                    "power": e.power,
                    "mcse": e.mcse,
                }
                for m, e in found.candidates
            ],
            "confirmation": [
                {
                    "per_arm": per_arm_for(p, m),
                    "replicates": e.replicates,
                    "power": e.power,
                    "mcse": e.mcse,
                    "ci95": e.ci95,
                }
                for m, e in found.confirmation
            ],
            "moves": found.moves,
        }
    else:
        raise QuestionError(
            "find", f"a simulation answers 'sample_size', 'power' or 'effect'; got {find!r}"
        )
    out = _result(p, final, alt, null, alpha, (seed, reps, chunk_size), warnings)
    if search_block is not None:
        pair = found.m - 1 >= m_min
        search_block["replicates_run"] = _replicates_run(runner.ledger, reps, pair)
    out["search"] = search_block
    if p["design"] == "survival_logrank":
        events = runner.extra_sum("events", STREAM_ALT, final, reps)
        out["events"] = {"mean_per_replicate": events / reps, "replicates": reps}
    return out


SIZE_VERDICTS = ("holds", "conservative", "exceeds")


def size_verdict(ci95: list[float], alpha: float) -> str:
    """Return how a simulated size compares with the alpha the test used, by its 95% interval.

    ``exceeds`` when the whole interval lies above alpha (the test is liberal: invalid),
    ``conservative`` when it lies below (valid, at some cost in power), else ``holds``.
    """
    lo, hi = ci95
    if lo > alpha:
        return "exceeds"
    if hi < alpha:
        return "conservative"
    return "holds"


def _replicates_run(ledger: Ledger, reps: int, pair: bool) -> dict:
    """The replicates the search ran, by kind, beside the minimum any search must run.

    The minimum is the confirmation pair (n and n − 1) and the type I check at n, each at the
    full count; chunks reused from a search candidate's run are counted once, when first run.
    """
    counts = {k: ledger.count(k) for k in ("search", "full", "null")}
    minimum = (3 if pair else 2) * reps
    return {**counts, "total": sum(counts.values()), "minimum": minimum, "draws": ledger.draws}


def _result(p, final, alt, null, alpha, settings, warnings) -> dict:
    """The parts of a simulated answer every find shares: power, type I error, method, seeds."""
    seed, reps, chunk_size = settings
    lo, hi = null.ci95
    verdict = size_verdict(null.ci95, alpha)
    if verdict == "exceeds":  # a conservative test is valid: only a liberal one is a warning
        warnings.append(
            f"simulated type I error {null.power:.4f} (95% CI {lo:.4f}–{hi:.4f}) exceeds alpha "
            f"{alpha:g}: the {p['test']} test does not hold its level under this data model, "
            "so a false-positive result is more likely than stated"
        )
    return {
        "per_arm": final,
        "power": _estimate_block(alt),
        "type_i_error": {
            **_estimate_block(null),
            "alpha": alpha,
            "verdict": verdict,
            "null_model": p["null_model"],
        },
        "search": None,
        "method": {
            "kind": "simulation",
            "test": p["test"],
            "replicates": reps,
            "data": p["data"],
            "hypothesis": p["rule"],
            "sufficient_statistics": p["sufficient"],
            "description": _describe(p),
        },
        "warnings": warnings,
        "reproducibility": {
            "seed": seed,
            "bit_generator": BIT_GENERATOR,
            "seed_scheme": SEED_SCHEME,
            "chunk_size": chunk_size,
        },
    }


# --- the simulated effect ------------------------------------------------------------------

# The effect field a find = effect simulation moves: the one each design's solve_effect returns.
EFFECT_FIELDS = {
    "two_means": "difference",
    "one_mean": "difference",
    "paired_mean": "difference",
    "two_proportions": "p_treatment",
    "anova_oneway": "cohens_f",
    "correlation": "r",
    "rank_sum": "prob_superiority",
    "survival_logrank": "hazard_ratio",
}


def _effect_axis(q: dict, design: str, rule: dict) -> dict:
    """Return how the effect field moves away from its null value: value = origin + sign·x.

    x ≥ 0 is the distance in the direction where power grows, up to ``x_max`` (``inclusive``
    when that end is a valid effect, e.g. a difference of 0 under equivalence). The directions
    follow each design's solve_effect; for one-sided log-rank they follow the simulated test.
    """
    eff = q.get("effect") or {}
    kind, margin, sign = rule["kind"], rule["margin"], rule["direction"]
    inf = math.inf
    if design == "two_means":
        if kind == "superiority":
            return {"origin": 0.0, "sign": sign, "x_max": inf, "inclusive": False}
        if kind == "noninferiority":
            return {"origin": margin, "sign": sign, "x_max": inf, "inclusive": False}
        return {"origin": margin, "sign": -1, "x_max": margin, "inclusive": True}
    if design in ("one_mean", "paired_mean"):
        return {"origin": 0.0, "sign": sign, "x_max": inf, "inclusive": False}
    if design == "anova_oneway":
        return {"origin": 0.0, "sign": 1, "x_max": inf, "inclusive": False}
    if design == "two_proportions":
        p1 = _effect(q, "p_control")
        if kind == "equivalence":
            edge = min(max(p1 + sign * margin, 0.0), 1.0)
            return {"origin": edge, "sign": -sign, "x_max": abs(edge - p1), "inclusive": True}
        origin = p1 if kind == "superiority" else p1 + margin
        room = 1.0 - origin if sign > 0 else origin
        return {"origin": origin, "sign": sign, "x_max": room, "inclusive": False}
    if design == "correlation":
        r0 = float(eff.get("r0") or 0.0)
        room = 1.0 - r0 if sign > 0 else 1.0 + r0
        return {"origin": r0, "sign": sign, "x_max": room, "inclusive": False}
    if design == "rank_sum":
        return {"origin": 0.5, "sign": sign, "x_max": 0.5, "inclusive": False}
    if design == "survival_logrank":
        # Longer times to the event count as better (higher_is_better), so a one-sided search
        # looks below 1; only when shorter times are better does it look above 1. Each
        # candidate's test then faces the candidate's own direction (see plan()).
        if rule["sides"] == 1 and sign < 0:
            return {"origin": 1.0, "sign": 1, "x_max": inf, "inclusive": False}
        return {"origin": 1.0, "sign": -1, "x_max": 1.0, "inclusive": False}
    raise QuestionError("design", f"no simulated effect search for design {design!r}")


def _effect_setup(q: dict) -> tuple[str, dict]:
    """Check a find = effect simulation question; return the field it moves and its axis."""
    design = q.get("design")
    sim = q.get("simulation")
    if not isinstance(sim, dict):
        raise QuestionError("simulation", "is required when method is simulation")
    if design not in EFFECT_FIELDS:
        raise QuestionError(
            "design", f"unknown design {design!r}; allowed: {', '.join(EFFECT_FIELDS)}"
        )
    name = EFFECT_FIELDS[design]
    if sim.get("data") is not None:
        raise QuestionError(
            "simulation.data",
            f"a simulated find = effect moves effect.{name} in arms built from the effect fields; "
            "a posted data model has no single effect parameter to move: remove simulation.data, "
            "or ask find = power for each candidate data model",
        )
    test = sim.get("test") or TESTS[design][0]
    if test not in TESTS[design]:
        raise QuestionError(
            "simulation.test",
            f"{test!r} is not offered for {design}; allowed: {', '.join(TESTS[design])}",
        )
    return name, _effect_axis(q, design, _hypothesis(q, design, test))


def _with_effect(q: dict, name: str, value: float) -> dict:
    return dict(q, effect={**(q.get("effect") or {}), name: value})


def _answer_effect(q, alpha, per_arm, executor, progress, cancel, budget=None) -> dict:
    """The smallest effect whose simulated power at n reaches the target (common random numbers)."""
    name, axis = _effect_setup(q)
    design = q["design"]
    seed, reps, chunk_size, search_reps, rule_name = _settings(q)
    target = _target(q, "the effect")
    origin, sign = axis["origin"], axis["sign"]

    def value(x: float) -> float:
        return origin + sign * x

    plans: dict[float, dict] = {}

    def plan_at(x: float) -> dict:
        if x not in plans:
            plans[x] = plan(_with_effect(q, name, value(x)), alpha)
        return plans[x]

    analytic = _analytic_effect(q, per_arm, alpha)
    x0, source = math.nan, "default"
    if analytic is not None:
        x0, source = sign * (analytic - origin), "analytic"
        if design == "survival_logrank" and sign > 0 and 0 < analytic < 1:
            x0 = 1.0 / analytic - 1.0  # the mirror image on the log scale
    x_max = axis["x_max"]
    if not (0 < x0 < x_max or (axis["inclusive"] and x0 == x_max)):
        x0, source = (1.0 if not math.isfinite(x_max) else x_max / 2), "default"
    p0 = plan_at(x0)
    final = _check_per_arm(p0, per_arm, "the effect")
    runner = _Runner(
        p0,
        seed,
        chunk_size,
        executor,
        progress,
        cancel,
        8 * search_reps + 3 * reps,
        full=reps,
        budget=budget,
    )

    def request(stream: int, x: float, r: int) -> tuple:
        return (stream, final, r, plan_at(x), ("effect", x))

    def evaluate(xs: list[float], r: int, null_at: float | None) -> list[search.Estimate]:
        requests = [request(STREAM_ALT, x, r) for x in xs]
        if null_at is not None:
            requests.append(request(STREAM_NULL, null_at, reps))
        return runner.batch(requests)[: len(xs)]

    def unreachable() -> QuestionError:
        edge = value(axis["x_max"]) if math.isfinite(axis["x_max"]) else None
        where = f" up to {edge:g}" if edge is not None else ""
        return QuestionError(
            "sample_size.per_arm",
            f"no {name}{where} reaches simulated power {target:g} with {final} per arm after "
            "adjustments; enrol more or lower the target power",
        )

    found = search.smallest_effect(
        evaluate,
        start=x0,
        x_max=axis["x_max"],
        inclusive=axis["inclusive"],
        target=target,
        rule=rule_name,
        search_replicates=search_reps,
        replicates=reps,
        unreachable=unreachable,
    )
    warnings = list(found.warnings)
    if source == "default":
        warnings.append(
            f"no analytic effect to start from; the search started at {name} = {value(x0):g}"
        )
    if design == "survival_logrank" and sign > 0:
        warnings.append(
            "hypothesis.higher_is_better is false, so shorter times to the event count as "
            "better and the hazard ratio was searched above 1"
        )
    p = plan_at(found.x)
    alt, null = runner.batch(
        [request(STREAM_ALT, found.x, reps), request(STREAM_NULL, found.x, reps)]
    )
    out = _result(p, final, alt, null, alpha, (seed, reps, chunk_size), warnings)
    out["effect"] = {
        "field": name,
        "value": value(found.x),
        "bracket": sorted([value(found.lo), value(found.x)]),
        "analytic": analytic,
    }
    out["search"] = {
        "field": name,
        "start": value(x0),
        "start_source": source,
        "target": target,
        "decision_rule": rule_name,
        "search_replicates": search_reps,
        "tolerance": search.EFFECT_TOLERANCE,
        "candidates": [
            {"effect": value(x), "replicates": e.replicates, "power": e.power, "mcse": e.mcse}
            for x, e in found.candidates
        ],
        "confirmation": [
            {
                "effect": value(x),
                "replicates": e.replicates,
                "power": e.power,
                "mcse": e.mcse,
                "ci95": e.ci95,
            }
            for x, e in found.confirmation
        ],
        "moves": found.moves,
    }
    if design == "survival_logrank":
        events = runner.extra_sum("events", *request(STREAM_ALT, found.x, reps))
        out["events"] = {"mean_per_replicate": events / reps, "replicates": reps}
    return out


def _analytic_effect(q: dict, per_arm: list[int] | None, alpha: float) -> float | None:
    """The formula's effect at n, the search's starting point; None when it has no answer."""
    if not per_arm:
        return None
    try:
        from . import designs

        effect = designs.get(q["design"]).solve_effect(q, [float(n) for n in per_arm], alpha)
        value = float(effect["value"])
    except Exception:  # only a starting point: the search brackets from a default instead
        return None
    return value if math.isfinite(value) else None


def _start(
    q: dict, p: dict, alpha: float, start: list[float] | None, target: float
) -> tuple[float, str]:
    """Return the first-arm size the search starts from and where it came from."""
    if start:
        return float(start[0]), "analytic"
    if q["simulation"].get("data") is None:
        try:
            from . import designs

            return float(designs.get(q["design"]).solve_n(q, alpha).per_arm[0]), "analytic"
        except Exception:  # the analytic designs are optional for a start; fall back below
            pass
    m = approximate_m(p, target)
    if m is not None and math.isfinite(m) and m > 0:
        return m, "normal approximation"
    return float(_FALLBACK_M), "default"
