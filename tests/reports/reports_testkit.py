"""Invented demo inputs for the report tests: questions as an investigator posts them.

Every question goes through the public normalizer (``load_question``), so the tests read the
same vocabulary as the API, the CLI and the examples (VOCAB §1).
"""

from service.engine import compute
from service.schemas import load_question
from tests.posted import SURV as SURVIVAL  # HR 0.75, control median 12 months

__all__ = ["D_HALF", "REQUEST", "SURVIVAL", "answer", "posted", "question"]

# d = 0.5: difference 0.5 with SD 1 (Cohen 1988, Table 2.4.1: 64 per group at power .80).
D_HALF = {"effect": {"difference": 0.5}, "assumptions": {"sd": 1.0}}

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


def posted(**fields) -> dict:
    """A question as posted; continuous × two groups, d = 0.5, unless ``fields`` say otherwise."""
    body = {"outcome": "continuous", "layout": "two_groups", "find": "sample_size", **D_HALF}
    body.update(fields)
    return body


def question(**fields) -> dict:
    """The normalized question of a posted one (see ``posted``)."""
    return load_question(posted(**fields))


def answer(**posted) -> dict:
    """The engine's record for a posted question (see ``question``)."""
    return compute(question(**posted))
