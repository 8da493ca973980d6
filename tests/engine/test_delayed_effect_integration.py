"""The delayed-effect log-rank drift (continuous-time Lakatos 1988, Biometrics 44:229) against an
independent numerical integration written here from the formula with scipy.integrate.quad, and
the power the record prints against the normal power at that drift; the simulation check of the
same model is test_survival_beyond_logrank.test_analytic_and_simulation_agree.

*formula*: with 1:1 allocation, uniform accrual over [0, a], follow-up f (T = a + f), control
hazard λ, hazard ratio θ after the lag L (1 before), loss hazard η in both groups, the expected
numbers at risk per randomized subject are r_g(u) = ½·S_g(u)·e^{−ηu}·G(u), G(u) = min(1, (T −
u)/a), and the log-rank score per subject has mean ∫ (r_t h_t − π(r_c h_c + r_t h_t)) du and
variance ∫ π(1 − π)(r_c h_c + r_t h_t) du, π = r_t/(r_c + r_t), over [0, T]. No published
number is claimed: the reference is this integral, computed independently of the engine's
Gauss–Legendre pieces.
"""

from __future__ import annotations

import math

import pytest
from scipy import integrate, stats

from service.engine import compute
from service.engine.designs import survival_profile as sp
from service.schemas.question import load_question


def _drift_by_quad(lam: float, hr: float, lag: float, loss: float, a: float, f: float) -> float:
    total = a + f

    def surv(u: float, treated: bool) -> float:
        if treated and u > lag:
            return math.exp(-lam * lag - hr * lam * (u - lag))
        return math.exp(-lam * u)

    def hazard(u: float, treated: bool) -> float:
        return hr * lam if treated and u > lag else lam

    def parts(u: float) -> tuple[float, float]:
        g = min(1.0, (total - u) / a) if a > 0 else 1.0
        r_c = 0.5 * surv(u, False) * math.exp(-loss * u) * g
        r_t = 0.5 * surv(u, True) * math.exp(-loss * u) * g
        d_c, d_t = r_c * hazard(u, False), r_t * hazard(u, True)
        share = r_t / (r_c + r_t)
        return d_t - share * (d_c + d_t), share * (1 - share) * (d_c + d_t)

    knots = sorted({lag, f}) if a > 0 else [lag]
    mean = integrate.quad(lambda u: parts(u)[0], 0, total, points=knots, epsabs=1e-13)[0]
    var = integrate.quad(lambda u: parts(u)[1], 0, total, points=knots, epsabs=1e-13)[0]
    return abs(mean) / math.sqrt(var)


CASES = [
    # (control hazard per month, HR after the lag, lag, loss hazard, accrual, follow-up)
    (0.06, 0.6, 4.0, 0.0, 12.0, 12.0),
    (0.03, 0.7, 6.0, 0.01, 24.0, 12.0),
    (0.1, 0.5, 2.0, 0.02, 0.0, 18.0),
]


@pytest.mark.parametrize(("lam", "hr", "lag", "loss", "a", "f"), CASES)
def test_engine_drift_matches_scipy_quad(lam, hr, lag, loss, a, f):
    prof = sp.Profile((), (lam,), hr, lag, (loss, loss), a, f, (1.0,))
    assert sp.drift(prof, 1.0) == pytest.approx(_drift_by_quad(lam, hr, lag, loss, a, f), rel=1e-6)


def test_recorded_power_is_the_normal_power_at_the_integrated_drift():
    lam, hr, lag, a, f, n = 0.06, 0.6, 4.0, 12.0, 12.0, 150
    body = {
        "outcome": "time_to_event",
        "layout": "two_groups",
        "find": "power",
        "effect": {"hazard_ratio": hr},
        "assumptions": {
            "time_unit": "months",
            "control_hazards": [lam],
            "treatment_lag": lag,
            "accrual": a,
            "follow_up": f,
        },
        "sample_size": {"per_group": [n, n]},
    }
    record = compute(load_question(body))
    mean = math.sqrt(2 * n) * _drift_by_quad(lam, hr, lag, 0.0, a, f)
    z = stats.norm.ppf(0.975)
    expected = stats.norm.cdf(mean - z) + stats.norm.cdf(-mean - z)
    assert record["power"]["estimate"] == pytest.approx(expected, abs=2e-4)
