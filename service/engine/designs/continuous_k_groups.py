"""Continuous outcome, k groups: one-way ANOVA by the noncentral F with λ = Σnᵢ(μᵢ − μ̄_w)²/σ² from
the actual group sizes; the Kruskal-Wallis test by simulation.

With equal groups this is λ = f²·N. With unequal sizes, group means give λ directly (μ̄_w the
size-weighted mean); Cohen's f alone is read with the size-weighted definition (Cohen 1988,
§8.2), so λ = f²·N again. The sample-size search keeps equal groups.
"""

from __future__ import annotations

import math

from scipy import stats

from .. import models
from ..errors import QuestionError
from ..quantiles import solve_effect_or_raise, solve_n_or_raise
from .base import (
    Analysis,
    DecisionRule,
    Design,
    EffectAxis,
    Field,
    Phrases,
    SimulationModel,
    Solution,
)
from .common import analytic_method, checked_analysis, fmt, make_validate, no_warnings, values

FIELDS = (
    Field(
        "group_means",
        "effect",
        "number_list",
        "Expected mean of each group, in group order (given with the common SD).",
        "group means",
        unit="outcome units",
        min_items=2,
    ),
    Field(
        "cohens_f",
        "effect",
        "number",
        "Cohen's f: the SD of the group means (each weighted by its share of the total) over "
        "the common within-group SD.",
        "Cohen's f",
        minimum=0,
    ),
    Field(
        "sd",
        "assumptions",
        "number",
        "Common within-group standard deviation (given with the group means).",
        "within-group standard deviation",
        unit="outcome units",
        minimum=0,
        exclusive_minimum=True,
    ),
    Field(
        "group_count",
        "assumptions",
        "integer",
        "Number of groups (given with Cohen's f).",
        "number of groups",
        minimum=2,
        maximum=1000,
    ),
)
FORMS = (("group_means", "sd"), ("group_count",))
ANALYSES = (
    Analysis(
        "f_test",
        "one-way ANOVA F test",
        ("analytic", "simulation"),
        ("superiority",),
        "Cohen 1988, ch. 8; power by the noncentral F",
    ),
    Analysis(
        "kruskal_wallis",
        "Kruskal-Wallis test",
        ("simulation",),
        ("superiority",),
        "Kruskal & Wallis 1952; power by simulation",
    ),
)


def _means(q: dict) -> tuple[list[float], float] | None:
    """Return (group means, sd) when the question gives them, else None."""
    v = values(q, FIELDS)
    if v.get("group_means") is None or v.get("sd") is None:
        return None
    return [float(m) for m in v["group_means"]], float(v["sd"])


def cohens_f(means: list[float], sd: float) -> float:
    """Cohen's f of equal groups: the SD of the means (divisor k) over the within SD."""
    k = len(means)
    grand = math.fsum(means) / k
    return math.sqrt(math.fsum((m - grand) ** 2 for m in means) / k) / sd


def derive(q: dict) -> dict:
    """Cohen's f and the number of groups from group means and the common SD."""
    given = _means(q)
    if given is None:
        return {}
    return {"cohens_f": cohens_f(*given), "group_count": len(given[0])}


def _f(q: dict) -> float:
    v = {**values(q, FIELDS), **derive(q)}
    f = v.get("cohens_f")
    if f is None:
        raise QuestionError("effect.cohens_f", "is required (or give group_means and sd)")
    if not f > 0:
        raise QuestionError("effect.cohens_f", f"must be greater than 0; got {f:g}")
    return float(f)


def group_count(q: dict) -> int:
    """Return the number of groups, checked to be a whole number of at least 2."""
    v = {**values(q, FIELDS), **derive(q)}
    k = v.get("group_count")
    if k is None:
        raise QuestionError("assumptions.group_count", "is required (or give group_means and sd)")
    if k != int(k) or k < 2:
        raise QuestionError(
            "assumptions.group_count", f"must be a whole number of at least 2; got {k:g}"
        )
    return int(k)


def _rules(errors: dict, v: dict, find: str, from_data: bool) -> None:
    means = v.get("group_means")
    if isinstance(means, list) and len(means) < 2:
        errors.setdefault("effect.group_means", []).append(
            f"needs at least 2 groups; got {len(means)}"
        )


validate = make_validate(FIELDS, FORMS, "cohens_f", ("group_means", "sd"), _rules)


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def lambda_power(lam: float, per_group: list[float], alpha: float) -> float:
    """Return the power of the one-way F test with noncentrality ``lam`` at the group sizes."""
    if lam <= 0.0:
        # Central F: the rejection rate is alpha exactly (scipy's ncf.sf misbehaves at nc = 0).
        return float(alpha)
    k = len(per_group)
    total = float(sum(per_group))
    df1, df2 = k - 1.0, total - k
    crit = stats.f.isf(alpha, df1, df2)
    return float(min(max(stats.ncf.sf(crit, df1, df2, lam), 0.0), 1.0))


def f_power(f: float, per_group: list[float], alpha: float) -> float:
    """Return the power for Cohen's f (size-weighted definition): λ = f²·N."""
    return lambda_power(f * f * float(sum(per_group)), per_group, alpha)


def means_lambda(means: list[float], sd: float, per_group: list[float]) -> float:
    """Return λ = Σnᵢ(μᵢ − μ̄_w)²/σ² with μ̄_w the size-weighted grand mean."""
    total = math.fsum(per_group)
    grand = math.fsum(n * m for n, m in zip(per_group, means, strict=True)) / total
    return math.fsum(n * (m - grand) ** 2 for n, m in zip(per_group, means, strict=True)) / sd**2


def groups(q: dict) -> int:
    """Return the number of groups."""
    return group_count(q)


def allocation(q: dict) -> list[float]:
    """Return equal relative group sizes."""
    return [1.0] * group_count(q)


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded n per group reaching the target power (root of the exact F curve)."""
    _check(q)
    k = group_count(q)
    f = _f(q)
    # Start at 2 per group: the noncentral F is unreliable at error df near 0.
    n = solve_n_or_raise(
        lambda n: f_power(f, [n] * k, alpha),
        float(q["target_power"]),
        2.0,
        field="effect.cohens_f",
        value=f,
    )
    return Solution(per_group=[n] * k)


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the exact power at the given (possibly fractional) n per group."""
    _check(q)
    if len(per_group) != group_count(q):
        raise QuestionError(
            "sample_size.per_group",
            f"needs one entry per group ({group_count(q)}); got {len(per_group)}",
        )
    sizes = [float(n) for n in per_group]
    given = _means(q)
    if given is not None and len(set(sizes)) > 1:
        # Equal groups keep λ = f²·N (the same number, digit for digit, as before).
        return lambda_power(means_lambda(*given, sizes), sizes, alpha)
    v = {**values(q, FIELDS), **derive(q)}
    return f_power(float(v["cohens_f"]), sizes, alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the smallest Cohen's f reaching the target power at the given n per group."""
    _check(q)
    sizes = [float(n) for n in per_group]
    f = solve_effect_or_raise(
        lambda x: f_power(x, sizes, alpha),
        float(q["target_power"]),
        per_group,
        hi=4.0 / math.sqrt(sum(sizes)),
    )
    return {"field": "cohens_f", "value": f}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    _check(q)
    return analytic_method(
        "f_test",
        DESIGN.analysis("f_test").label,
        "noncentral F, λ = f²·N",
        "Cohen (1988), ch. 8",
        [
            "df = (k − 1, N − k) with N the total over k groups; λ = Σnᵢ(μᵢ − μ̄_w)²/σ² from "
            "the actual group sizes, μ̄_w the size-weighted grand mean.",
            "Cohen's f is the SD of the group means around their size-weighted mean, each group "
            "weighted by its share of N (Cohen 1988, §8.2), over the common within-group SD; "
            "with equal groups this is the plain SD of the means (divisor k). Group means given "
            "with sd are used directly.",
            "The sample-size search assumes equal groups.",
            "The F test is two-sided by nature; the alternative setting does not apply.",
        ],
        derive(q),
    )


# --- simulation -------------------------------------------------------------------------------


def default_data(q: dict) -> list[dict]:
    """Normal groups at the posted means and SD, or equally spaced means giving Cohen's f."""
    given = _means(q)
    if given is not None:
        means, sd = given
        return [{"family": "normal", "mean": m, "sd": sd} for m in means]
    k, f = group_count(q), _f(q)
    # Equally spaced means with SD (divisor k) equal to f and unit SD within groups; with
    # unequal posted sizes, f is size-weighted (as the analytic answer reads it).
    sizes = list((q.get("sample_size") or {}).get("per_group") or [])
    if len(sizes) == k and len(set(sizes)) > 1:
        w = [float(n) / math.fsum(sizes) for n in sizes]
        center = math.fsum(wi * i for i, wi in enumerate(w))
        spread = math.sqrt(math.fsum(wi * (i - center) ** 2 for i, wi in enumerate(w)))
        return [
            {"family": "normal", "mean": f / spread * (i - center), "sd": 1.0} for i in range(k)
        ]
    step = f / math.sqrt((k * k - 1) / 12.0)
    return [{"family": "normal", "mean": step * (i - (k - 1) / 2), "sd": 1.0} for i in range(k)]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    """Every group shifted to the first group's mean."""
    c0 = models.center(arms[0])
    return [
        models.shifted(a, c0 - models.center(a)) for a in arms
    ], "every group shifted to the first group's mean, shapes unchanged"


def approximate_n(plan, target: float) -> float | None:
    from ..approximate import k_groups_first

    return k_groups_first(plan, target)


def implied_fields(q: dict, arms: list[dict]) -> dict:
    """Group means, the root mean within-group SD, Cohen's f and the number of groups."""
    mv = [models.moments(a) for a in arms]
    if not all(m is not None and v is not None for m, v in mv):
        return {"fields": {}, "missing": ["group_means", "sd"]}
    means = [m for m, _ in mv]
    within = sum(v for _, v in mv) / len(mv)
    out = {"fields": {"group_means": means, "sd": math.sqrt(within)}, "missing": []}
    if len({round(v, 12) for _, v in mv}) > 1:
        out["note"] = "the groups' variances differ; sd is the root mean within-group variance"
    return out


SIMULATION = SimulationModel(
    data_keys=("groups",),
    default_data=default_data,
    null_data=null_data,
    kernels={"f_test": "f_test", "kruskal_wallis": "kruskal_wallis"},
    effect_axis=lambda q, rule: EffectAxis(0.0, 1, math.inf),
    implied_fields=implied_fields,
    approximate_n=approximate_n,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    v = values(q, FIELDS)
    if v.get("group_means") is not None:
        return "group means of " + ", ".join(fmt(m) for m in v["group_means"])
    f = v.get("cohens_f")
    if f is None and record and record.get("effect"):
        f = record["effect"]["value"]
    return "Cohen's f" if f is None else f"a Cohen's f of {fmt(f)}"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    if v.get("sd") is not None:
        return f"a common within-group standard deviation of {fmt(v['sd'])}"
    if v.get("group_count") is not None:
        return f"{v['group_count']} groups"
    return ""


DESIGN = Design(
    outcome="continuous",
    layout="k_groups",
    label="Continuous outcome, k groups",
    fields=FIELDS,
    forms=FORMS,
    solved="cohens_f",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "f_test",
    groups=groups,
    allocation=allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_diet_three_arm.json",
    contrast=lambda q: None,  # the F test has no direction
    null_effect=lambda q: 0.0,
    directional=False,
)
