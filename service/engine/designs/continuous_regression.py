"""Continuous outcome, linear regression: the F test that one or more predictors add to a model,
by the noncentral F with λ = f²·N (Cohen 1988, ch. 9).

The effect is Cohen's f² = ΔR²/(1 − R²_full), given as f² itself, as the R² increment the tested
predictors bring over the other predictors' R², or (one tested predictor) as a slope with the
predictor's SD, the residual SD and the R² of that predictor on the other predictors:
f² = β²·σ_x²·(1 − R²_x)/σ². Numerator df = the tested predictors u, denominator
df = N − u − (other predictors) − 1.
"""

from __future__ import annotations

import math

from scipy import stats

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
from .common import (
    analytic_method,
    checked_analysis,
    fmt,
    make_validate,
    no_warnings,
    one_group,
    one_group_allocation,
    values,
)

_R2 = {"minimum": 0, "maximum": 1, "exclusive_maximum": True}
_POSITIVE = {"minimum": 0, "exclusive_minimum": True}
FIELDS = (
    Field(
        "f_squared",
        "effect",
        "number",
        "Cohen's f²: the R² increment of the tested predictors over 1 − the full model's R².",
        "Cohen's f²",
        **_POSITIVE,
    ),
    Field(
        "r2_increment",
        "effect",
        "number",
        "The increase in R² when the tested predictors join the other predictors.",
        "R² increment",
        minimum=0,
        maximum=1,
        exclusive_minimum=True,
        exclusive_maximum=True,
    ),
    Field(
        "slope",
        "effect",
        "number",
        "The regression coefficient of the one tested predictor, in outcome units per "
        "predictor unit (given with sd_predictor and sd_residual).",
        "slope",
        unit="outcome units per predictor unit",
    ),
    Field(
        "r2_other",
        "assumptions",
        "number",
        "R² of the outcome on the other predictors alone (given with r2_increment).",
        "R² of the other predictors",
        default=0.0,
        **_R2,
    ),
    Field(
        "sd_predictor",
        "assumptions",
        "number",
        "Standard deviation of the tested predictor (given with slope).",
        "predictor standard deviation",
        unit="predictor units",
        **_POSITIVE,
    ),
    Field(
        "sd_residual",
        "assumptions",
        "number",
        "Residual standard deviation of the outcome in the full model (given with slope).",
        "residual standard deviation",
        unit="outcome units",
        **_POSITIVE,
    ),
    Field(
        "r2_covariates",
        "assumptions",
        "number",
        "R² of the tested predictor regressed on the other predictors (given with slope; "
        "the variance inflation is 1/(1 − R²)).",
        "R² of the tested predictor on the other predictors",
        default=0.0,
        **_R2,
    ),
    Field(
        "tested_predictors",
        "assumptions",
        "integer",
        "Number of predictors tested together (the numerator degrees of freedom).",
        "number of tested predictors",
        default=1,
        minimum=1,
        maximum=100,
    ),
    Field(
        "other_predictors",
        "assumptions",
        "integer",
        "Number of other predictors in the model besides the intercept.",
        "number of other predictors",
        default=0,
        minimum=0,
        maximum=100,
    ),
)
FORMS: tuple[tuple[str, ...], ...] = (
    (),
    ("r2_increment",),
    ("slope", "sd_predictor", "sd_residual"),
)
ANALYSES = (
    Analysis(
        "partial_f",
        "F test of the tested predictors in a linear regression",
        ("analytic", "simulation"),
        ("superiority",),
        "Cohen 1988, ch. 9; power by the noncentral F",
    ),
)


def _rules(errors: dict, v: dict, find: str, from_data: bool) -> None:
    if v.get("slope") is not None and int(v.get("tested_predictors") or 1) != 1:
        errors.setdefault("assumptions.tested_predictors", []).append(
            f"must be 1 with a slope (one coefficient is tested); got {v['tested_predictors']}"
        )
    if v.get("r2_increment") is not None and v.get("r2_other") is not None:
        if float(v["r2_increment"]) + float(v["r2_other"]) >= 1:
            errors.setdefault("effect.r2_increment", []).append(
                f"plus r2_other ({fmt(v['r2_other'])}) must stay below 1; got "
                f"{fmt(v['r2_increment'])}"
            )
    if v.get("slope") is not None and float(v["slope"]) == 0:
        errors.setdefault("effect.slope", []).append("must differ from 0; got 0")


validate = make_validate(FIELDS, FORMS, "f_squared", rules=_rules)


def _check(q: dict) -> str:
    return checked_analysis(q, DESIGN)


def _int(q: dict, name: str) -> int:
    decl = next(f for f in FIELDS if f.name == name)
    value = values(q, FIELDS).get(name)
    if value is None or value != int(value) or decl.range_error(value):
        raise QuestionError(decl.path, f"must be a whole number {decl.range_text()}; got {value}")
    return int(value)


def predictors(q: dict) -> tuple[int, int]:
    """Return (tested predictors u, other predictors k)."""
    return _int(q, "tested_predictors"), _int(q, "other_predictors")


def derive(q: dict) -> dict:
    """Cohen's f² and the full model's R² (when the R² increment is given) from the form used."""
    v = values(q, FIELDS)
    if v.get("r2_increment") is not None:
        inc, other = float(v["r2_increment"]), float(v.get("r2_other") or 0.0)
        return {"f_squared": inc / (1.0 - other - inc), "full_model_r_squared": other + inc}
    if v.get("slope") is not None and v.get("sd_predictor") and v.get("sd_residual"):
        b, sx, se = float(v["slope"]), float(v["sd_predictor"]), float(v["sd_residual"])
        keep = 1.0 - float(v.get("r2_covariates") or 0.0)
        return {"f_squared": (b * sx) ** 2 * keep / se**2, "variance_inflation": 1.0 / keep}
    return {}


def f_squared(q: dict) -> float:
    """Return Cohen's f² from whichever form the question uses."""
    v = {**values(q, FIELDS), **derive(q)}
    f2 = v.get("f_squared")
    if f2 is None:
        raise QuestionError(
            "effect.f_squared",
            "is required (or give r2_increment, or slope with sd_predictor and sd_residual)",
        )
    if not f2 > 0:
        raise QuestionError("effect.f_squared", f"must be greater than 0; got {f2:g}")
    return float(f2)


def f_power(f2: float, n: float, u: int, k: int, alpha: float) -> float:
    """Power of the partial F test: noncentral F(u, N − u − k − 1) with λ = f²·N."""
    df2 = n - u - k - 1.0
    if df2 <= 0:
        return 0.0
    crit = stats.f.isf(alpha, u, df2)
    if f2 <= 0:
        return float(alpha)
    return float(min(max(stats.ncf.sf(crit, u, df2, f2 * n), 0.0), 1.0))


def _total(q: dict, per_group: list[float]) -> float:
    u, k = predictors(q)
    n = float(per_group[0])
    if not n > u + k + 1:
        raise QuestionError(
            "sample_size.per_group",
            f"must exceed the predictors plus the intercept ({u + k + 1}) so the residual "
            f"has degrees of freedom; got {n:g}",
        )
    return n


def solve_n(q: dict, alpha: float) -> Solution:
    """Return the unrounded N reaching the target power (root of the noncentral F curve)."""
    _check(q)
    u, k = predictors(q)
    f2 = f_squared(q)
    n = solve_n_or_raise(
        lambda n: f_power(f2, n, u, k, alpha),
        float(q["target_power"]),
        u + k + 2.0,
        field="effect.f_squared",
        value=f2,
    )
    return Solution(per_group=[n])


def power(q: dict, per_group: list[float], alpha: float) -> float:
    """Return the noncentral F power at N."""
    _check(q)
    u, k = predictors(q)
    return f_power(f_squared(q), _total(q, per_group), u, k, alpha)


def solve_effect(q: dict, per_group: list[float], alpha: float) -> dict:
    """Return the smallest f² reaching the target power at N."""
    _check(q)
    u, k = predictors(q)
    n = _total(q, per_group)
    f2 = solve_effect_or_raise(
        lambda x: f_power(x, n, u, k, alpha),
        float(q["target_power"]),
        per_group,
        hi=100.0 / n + 10.0,
    )
    return {"field": "f_squared", "value": f2}


def describe(q: dict) -> dict:
    """Return the analytic method block for the record."""
    _check(q)
    u, k = predictors(q)
    return analytic_method(
        "partial_f",
        DESIGN.analysis("partial_f").label,
        "noncentral F, λ = f²·N",
        "Cohen (1988), ch. 9",
        [
            f"df = ({u}, N − {u + k + 1}): {u} tested predictor(s), {k} other predictor(s) and "
            "the intercept; λ = f²·N with f² = ΔR²/(1 − R²_full).",
            "A slope is converted with f² = β²·σ_x²·(1 − R²_x)/σ², R²_x the R² of the tested "
            "predictor on the other predictors.",
            "The noncentral F treats the predictors as fixed; with random (normal) predictors "
            "the expected noncentrality is f²·(N − k − 1), slightly less.",
            "The F test is two-sided by nature; the alternative setting does not apply.",
        ],
        derive(q),
    )


# --- simulation -------------------------------------------------------------------------------


def _model(q: dict, f2: float) -> dict:
    u, k = predictors(q)
    return {"family": "linear_regression", "tested": u, "other": k, "f_squared": f2}


def default_data(q: dict) -> list[dict]:
    """Independent standard normal predictors; the tested coefficients share f², error SD 1."""
    return [_model(q, f_squared(q))]


def null_data(q: dict, arms: list[dict], rule: DecisionRule) -> tuple[list[dict], str]:
    return [_model(q, 0.0)], "the tested coefficients set to 0"


def approximate_n(plan, target: float) -> float | None:
    m = plan.models[0]
    try:
        return solve_n_or_raise(
            lambda n: f_power(m["f_squared"], n, m["tested"], m["other"], plan.alpha),
            target,
            m["tested"] + m["other"] + 2.0,
            field="effect.f_squared",
            value=m["f_squared"],
        )
    except QuestionError:
        return None


def check_models(q: dict, arms: list[dict], labels: list[str]) -> None:
    sizes = (q.get("sample_size") or {}).get("per_group")
    if sizes:
        _total(q, [sizes[0]])


SIMULATION = SimulationModel(
    data_keys=(),
    default_data=default_data,
    null_data=null_data,
    kernels={"partial_f": "partial_f"},
    effect_axis=lambda q, rule: EffectAxis(0.0, 1, math.inf),
    check_models=check_models,
    data_block=lambda arms, labels, settings: {"regression": dict(arms[0])},
    approximate_n=approximate_n,
    min_size=3,
)


def effect_sentence(q: dict, record: dict | None) -> str:
    v = values(q, FIELDS)
    if v.get("r2_increment") is not None:
        return f"an R² increment of {fmt(v['r2_increment'])}"
    if v.get("slope") is not None:
        return f"a slope of {fmt(v['slope'])} outcome units per predictor unit"
    f2 = v.get("f_squared")
    if f2 is None and record and record.get("effect"):
        f2 = record["effect"]["value"]
    return "Cohen's f²" if f2 is None else f"a Cohen's f² of {fmt(f2)}"


def assumptions_sentence(q: dict) -> str:
    v = values(q, FIELDS)
    u, k = int(v.get("tested_predictors") or 1), int(v.get("other_predictors") or 0)
    parts = [
        f"{u} tested predictor{'s' if u != 1 else ''}",
        f"{k} other predictor{'s' if k != 1 else ''}",
    ]
    if v.get("r2_increment") is not None:
        parts.append(f"an R² of {fmt(float(v.get('r2_other') or 0.0))} for the other predictors")
    if v.get("slope") is not None:
        parts.append(
            f"a predictor SD of {fmt(v['sd_predictor'])}, a residual SD of "
            f"{fmt(v['sd_residual'])} and an R² of {fmt(float(v.get('r2_covariates') or 0.0))} "
            "of the predictor on the others"
        )
    return ", ".join(parts)


DESIGN = Design(
    outcome="continuous",
    layout="regression",
    label="Continuous outcome, linear regression",
    fields=FIELDS,
    forms=FORMS,
    solved="f_squared",
    analyses=ANALYSES,
    validate=validate,
    default_analysis=lambda q: "partial_f",
    groups=one_group,
    allocation=one_group_allocation,
    derive=derive,
    solve_n=solve_n,
    power=power,
    solve_effect=solve_effect,
    describe=describe,
    warnings_for=no_warnings,
    simulation=SIMULATION,
    phrases=Phrases(effect=effect_sentence, assumptions=assumptions_sentence),
    example="northbridge_rehab_regression.json",
    contrast=lambda q: None,  # the F test has no direction
    null_effect=lambda q: 0.0,
    directional=False,
)
