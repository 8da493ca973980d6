"""Invented demo inputs for the report tests; questions come from tests/engine/questions.py."""

from tests.engine.questions import EFFECTS

D_HALF = EFFECTS["two_means"]  # d = 0.5
# Control median 12 months -> hazard ln 2 / 12; accrual 24, extra follow-up 12.
SURVIVAL = EFFECTS["survival_logrank"]

# Invented demo request (Northbridge General Hospital research office); not real data.
REQUEST = {
    "id": "5f0c2d9e8a7b4c1d9e0f1a2b3c4d5e6f",
    "status": "computed",
    "protocol": {
        "id": "NGH-2025-014",
        "title": "Home blood-pressure coaching after discharge",
        "version": "1.2",
        "principal_investigator": "Dr. A. Okafor",
    },
    "requester": {
        "name": "Maya Lindqvist",
        "email": "m.lindqvist@northbridge.example",
        "department": "Cardiology research office",
    },
    "deadline": "2025-03-31",
    "context": {"effect_source": "the Northbridge pilot study of 2023"},
}
