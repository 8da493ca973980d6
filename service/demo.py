"""Demo data for the embedded launcher: an invented hospital research office and three protocols.

Northbridge General Hospital and its studies are invented; the numbers are for demonstration
only. Each protocol goes through the real API (token check, validation, seed, audit trail, queue)
as the research office's intake form would send it, with a fixed Idempotency-Key, so loading
twice stores nothing new. Each asks for explorations (sensitivity grids, and robustness panels
for the blood-pressure and length-of-stay studies) that the workers compute once the request is
computed.
"""

from __future__ import annotations

from typing import Any

OFFICE = "Northbridge General Hospital — Clinical Research Office"
# The token the demo submits with: an intake-form token, as the research office's form has.
TOKEN_ROLE = "intake"
TOKEN_NAME = "Northbridge intake form (demo)"

REQUESTER = {
    "name": "Dr. Ines Halvorsen",
    "email": "i.halvorsen@northbridge-general.example",
    "department": OFFICE,
}

# (idempotency key, request body). Questions use the posted form (DEVELOPERS.md, "The question").
PROTOCOLS: tuple[tuple[str, dict[str, Any]], ...] = (
    (
        "northbridge-demo-bp-telemonitoring",
        {
            "protocol": {
                "id": "NGH-CRO-2025-014",
                "title": "Home blood-pressure telemonitoring versus usual care after discharge",
                "principal_investigator": "Dr. Ines Halvorsen",
            },
            "requester": REQUESTER,
            "notes": "Primary outcome: systolic pressure at 12 weeks. Difference of 5 mmHg, "
            "SD 12 mmHg from the hypertension clinic's audit; 10% expected dropout.",
            "effect_source": "SD from the 2024 Northbridge hypertension clinic audit of home readings",
            # How the answer moves with the effect, the SD and dropout; and how the t test
            # behaves if the pressures are skewed or heavy-tailed.
            "explorations": [
                {
                    "type": "sensitivity_grid",
                    "grid": {
                        "effect.difference": [-4.0, -5.0, -6.0],
                        "assumptions.sd": [10.0, 12.0, 14.0],
                        "adjustments.dropout": [0.1, 0.2],
                    },
                },
                {"type": "robustness_panel"},
            ],
            "question": {
                "outcome": "continuous",
                "layout": "two_groups",
                "find": "sample_size",
                "alpha": 0.05,
                "target_power": 0.9,
                "effect": {"difference": -5.0},
                "assumptions": {"sd": 12.0},
                "adjustments": {"dropout": 0.1},
            },
        },
    ),
    (
        "northbridge-demo-length-of-stay",
        {
            "protocol": {
                "id": "NGH-CRO-2025-021",
                "title": "Enhanced-recovery pathway and length of stay after hip replacement",
                "principal_investigator": "Dr. Tomasz Reyes-Lindqvist",
            },
            "requester": {
                "name": "Dr. Tomasz Reyes-Lindqvist",
                "email": "t.reyes-lindqvist@northbridge-general.example",
                "department": "Orthopaedics",
            },
            "notes": "Length of stay is right-skewed; the ward's records fit a lognormal "
            "(median about 5 days). Power of a rank-sum comparison at 120 patients.",
            "effect_source": "lognormal fit to the orthopaedic ward's 2023 length-of-stay records",
            # Simulated cells, fanned out across the workers on the request's own seed; and how
            # the rank-sum test fares if the stays are not lognormal after all.
            "explorations": [
                {
                    "type": "sensitivity_grid",
                    "grid": {"adjustments.dropout": [0.0, 0.1, 0.2], "alpha": [0.05, 0.025]},
                },
                {"type": "robustness_panel"},
            ],
            "question": {
                "outcome": "ordinal",
                "layout": "two_groups",
                "find": "power",
                "sample_size": {"total": 120},
                "simulation": {
                    "replicates": 2000,
                    "seed": 20250321,
                    "data": {
                        "control": {"family": "lognormal", "mu": 1.61, "sigma": 0.55},
                        "treatment": {"family": "lognormal", "mu": 1.39, "sigma": 0.55},
                    },
                },
            },
        },
    ),
    (
        "northbridge-demo-readmission-survival",
        {
            "protocol": {
                "id": "NGH-CRO-2025-030",
                "title": "Pharmacist-led follow-up and time to readmission in heart failure",
                "principal_investigator": "Dr. Amara Okonkwo-Stein",
            },
            "requester": {
                "name": "Dr. Amara Okonkwo-Stein",
                "email": "a.okonkwo-stein@northbridge-general.example",
                "department": "Cardiology",
            },
            "notes": "Median time to readmission in the control group about 10 months; "
            "18 months of recruitment and 12 more of follow-up.",
            "explorations": [
                {
                    "type": "sensitivity_grid",
                    "grid": {
                        "effect.hazard_ratio": [0.65, 0.7, 0.75],
                        "adjustments.dropout": [0.0, 0.1],
                    },
                }
            ],
            "question": {
                "outcome": "time_to_event",
                "layout": "two_groups",
                "find": "sample_size",
                "target_power": 0.8,
                "effect": {"hazard_ratio": 0.7},
                "assumptions": {
                    "time_unit": "months",
                    "control_median": 10.0,
                    "accrual": 18.0,
                    "follow_up": 12.0,
                    "loss_hazard": 0.01,
                },
            },
        },
    ),
)


class DemoLoadError(RuntimeError):
    """A demo protocol was refused by the API (the message carries the API's answer)."""


def load(config: dict | None = None) -> int:
    """Submit the demo protocols that are not stored yet; return how many were new."""
    from service import create_app
    from service.api.auth import local_client
    from service.store.db import session_scope
    from service.store.requests import by_idempotency_key

    app = create_app(config)
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        missing = [(k, b) for k, b in PROTOCOLS if by_idempotency_key(session, k) is None]
    if not missing:
        return 0
    # A key belongs to the token that first used it, and a token's secret is not kept, so
    # protocols already stored are skipped here rather than replayed through the API.
    client = local_client(app, role=TOKEN_ROLE, name=TOKEN_NAME)
    created = 0
    for key, body in missing:
        resp = client.post("/v1/requests", json=body, headers={"Idempotency-Key": key})
        if resp.status_code == 202:
            created += 1
        elif resp.status_code != 200:  # 200: a concurrent load stored it first
            detail = resp.get_json(silent=True) or resp.get_data(as_text=True)
            raise DemoLoadError(
                f"demo protocol {body['protocol']['id']} refused ({resp.status_code}): {detail}"
            )
    return created
