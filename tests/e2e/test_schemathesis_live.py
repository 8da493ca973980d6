"""schemathesis against the running embedded default, every check on, bounded.

The document is read from the live service's ``/openapi.json`` (no token), and every operation
gets positive cases (data the document says is valid: the server must accept it, answering 2xx,
or 401/403/404/409/429 where the document says so) and negative cases (data the document says
is invalid: the server must refuse it with a 4xx). Every answer is checked against the
document: no 5xx, a documented status, content type, headers and body schema, 401 without the
token, 405 for methods the path does not have. Half the positive cases of an operation with a
``request_id`` in its path use a real computed request, so success answers are checked too.

Bounded by ``MAX_EXAMPLES`` per operation and mode (derandomized, no shrinking): about 750
calls, a minute or two on the CI machine.
"""

from __future__ import annotations

import json
from urllib.request import Request, urlopen

import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st
from hypothesis.errors import Unsatisfiable
from schemathesis.checks import CHECKS, load_all_checks
from schemathesis.generation import GenerationMode

pytestmark = pytest.mark.slow

MAX_EXAMPLES = 10

# An invented Northbridge General Hospital study, answered at submission (analytic).
VALID_REQUEST = {
    "protocol": {"id": "NGH-2025-090", "title": "Pressure-ulcer prevention bundle"},
    "requester": {
        "name": "Dr. Ines Varga",
        "email": "i.varga@northbridge.example",
        "department": "Nursing research",
    },
    "question": {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
    },
}

FUZZ = settings(
    max_examples=MAX_EXAMPLES,
    derandomize=True,
    deadline=None,
    phases=[Phase.explicit, Phase.generate],  # no shrinking: a failure is reported as found
    suppress_health_check=list(HealthCheck),
    database=None,
)


def _role(operation) -> str:
    if operation.path.startswith("/v1/tokens") or operation.path == "/metrics":
        return "admin"
    if operation.path.endswith("/reruns") and operation.method.upper() == "POST":
        return "auditor"  # reruns are the auditor's
    return "statistician"


@pytest.fixture(scope="module")
def computed_id(live_service) -> str:
    """A request that exists and is computed, so id paths answer 200 as well as 404."""
    reply = urlopen(
        Request(
            f"{live_service['url']}/v1/requests",
            data=json.dumps(VALID_REQUEST).encode(),
            method="POST",
            headers={
                "Authorization": f"Bearer {live_service['secrets']['statistician']}",
                "Content-Type": "application/json",
            },
        ),
        timeout=30,
    )
    body = json.loads(reply.read())
    assert reply.status == 202 and body["status"] == "computed", body
    return body["id"]


@pytest.fixture(scope="module")
def api_schema(live_service):
    # Fetched as a client generator would: no token.
    return schemathesis.openapi.from_url(f"{live_service['url']}/openapi.json")


def _fuzz(operation, mode: GenerationMode, live_service: dict, computed_id: str, checks) -> None:
    headers = {"Authorization": f"Bearer {live_service['secrets'][_role(operation)]}"}
    real_ids = mode is GenerationMode.POSITIVE and "{request_id}" in operation.path

    @FUZZ
    @given(case=operation.as_strategy(generation_mode=mode), real=st.booleans())
    def run(case, real: bool) -> None:
        if real and real_ids:
            case.path_parameters["request_id"] = computed_id
        case.call_and_validate(base_url=live_service["url"], headers=headers, checks=checks)

    run()


def test_every_operation_keeps_to_the_document(api_schema, live_service, computed_id):
    load_all_checks()
    checks = CHECKS.get_all()
    names = {check.__name__ for check in checks}
    assert {"positive_data_acceptance", "negative_data_rejection", "ignored_auth"} <= names
    # schemathesis' lazy pytest loader does not work with this pytest, so the operations are
    # walked here; every failing operation is reported, not only the first.
    failures: dict[str, str] = {}
    tested: list[str] = []
    for result in api_schema.get_all_operations():
        operation = result.ok()
        tested.append(operation.label)
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
            try:
                _fuzz(operation, mode, live_service, computed_id, checks)
            except Unsatisfiable:
                # Nothing of the operation can be made invalid (no parameters, no body).
                assert mode is GenerationMode.NEGATIVE, operation.label
            except (Exception, BaseExceptionGroup) as exc:  # collect: one report of all
                failures[f"{operation.label} [{mode.value}]"] = f"{type(exc).__name__}: {exc}"[
                    :3000
                ]
    assert len(tested) >= 30, f"only {len(tested)} operations in the document: {tested}"
    assert not failures, "\n\n".join(f"{label}\n{text}" for label, text in failures.items())
