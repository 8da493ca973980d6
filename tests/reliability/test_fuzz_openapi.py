"""Fuzz the API from its own OpenAPI document: no 5xx, and every answer is what the document says.

schemathesis generates requests for every operation in ``/openapi.json`` (bounded, derandomized,
no shrinking) and sends them through the WSGI app with a statistician's token (an admin's for the
token endpoints). Each response is checked for: no server error, a documented status code, a
documented content type, and a JSON body matching the documented schema. The app runs on a
SQLite file and a filesystem broker in a temporary folder.
"""

from __future__ import annotations

import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)

from service import create_app
from service.store import tokens as token_store
from service.store.db import session_scope
from service.store.migrate import upgrade
from workers.tasks import run_request_job

pytestmark = pytest.mark.slow

CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_schema_conformance,
]


@pytest.fixture(scope="module")
def fuzz_app(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz")
    url = f"sqlite:///{folder / 'sizewise.db'}"
    upgrade(url)
    app = create_app(
        {
            "DATABASE_URL": url,
            "BROKER_URL": f"filesystem://{folder / 'broker'}",
            "TESTING": True,
            # The fuzzer sends hundreds of calls a minute with one token; 429 is not the point.
            "RATE_LIMIT": "100000/minute",
            # The fixture drives a queued request through a worker function by hand.
            "ANSWER_AT_SUBMISSION": False,
        }
    )
    yield app
    app.extensions["sizewise"]["engine"].dispose()


@pytest.fixture(scope="module")
def secrets(fuzz_app) -> dict[str, str]:
    issued = {}
    with session_scope(fuzz_app.extensions["sizewise"]["sessions"]) as session:
        for role in ("statistician", "auditor", "admin"):
            issued[role] = token_store.create_token(session, role, f"fuzz {role}")[1]
    return issued


# Invented Northbridge General Hospital study: a valid body, so success answers are checked too.
VALID_QUESTION = {
    "outcome": "continuous",
    "layout": "two_groups",
    "find": "sample_size",
    "effect": {"difference": 0.5},
    "assumptions": {"sd": 1.0},
}
VALID_REQUEST = {
    "protocol": {"id": "NGH-2025-077", "title": "Falls clinic follow-up calls"},
    "requester": {
        "name": "Dr. Lena Marsh",
        "email": "l.marsh@northbridge.example",
        "department": "Geriatrics",
    },
    "question": VALID_QUESTION,
}
VALID_BODIES = {"/v1/requests": VALID_REQUEST, "/v1/calculations": {"question": VALID_QUESTION}}


@pytest.fixture(scope="module")
def computed_id(fuzz_app, secrets) -> str:
    """A request that exists and is computed, so id paths can answer 200 as well as 404."""
    client = fuzz_app.test_client()
    reply = client.post(
        "/v1/requests",
        json=VALID_REQUEST,
        headers={"Authorization": f"Bearer {secrets['statistician']}"},
    )
    assert reply.status_code == 202, reply.get_json()
    request_id = reply.get_json()["id"]
    outcome = run_request_job(request_id, fuzz_app.extensions["sizewise"]["config"])
    assert outcome == "computed"
    return request_id


@pytest.fixture(scope="module")
def api_schema(fuzz_app, secrets):
    return schemathesis.openapi.from_wsgi(
        "/openapi.json", fuzz_app, headers={"Authorization": f"Bearer {secrets['statistician']}"}
    )


FUZZ = settings(
    max_examples=12,
    derandomize=True,
    deadline=None,
    phases=[Phase.explicit, Phase.generate],  # no shrinking: a failure is reported as found
    suppress_health_check=list(HealthCheck),
    database=None,
)


def _fuzz(operation, secrets: dict[str, str], computed_id: str) -> None:
    role = "admin" if operation.path.startswith("/v1/tokens") else "statistician"
    if operation.path.endswith("/reruns") and operation.method.upper() == "POST":
        role = "auditor"  # reruns are the auditor's
    headers = {"Authorization": f"Bearer {secrets[role]}"}

    @FUZZ
    @given(case=operation.as_strategy(), real=st.booleans())
    def run(case, real: bool) -> None:
        # Half the cases aim at real data; random ids and bodies alone only reach 404 and 422.
        if real and case.path_parameters and "request_id" in case.path_parameters:
            case.path_parameters["request_id"] = computed_id
        if real and operation.path in VALID_BODIES and operation.method.upper() == "POST":
            case.body = VALID_BODIES[operation.path]
        case.call_and_validate(headers=headers, checks=CHECKS)

    run()


def test_every_operation_answers_as_documented(api_schema, secrets, computed_id):
    # schemathesis' lazy pytest loader does not work with this pytest, so the operations are
    # walked here; every failing operation is reported, not only the first.
    failures, tested = {}, 0
    for result in api_schema.get_all_operations():
        operation = result.ok()
        tested += 1
        try:
            _fuzz(operation, secrets, computed_id)
        except (
            Exception,
            BaseExceptionGroup,
        ) as exc:  # collect: one report listing every failing operation
            failures[operation.label] = f"{type(exc).__name__}: {exc}"[:3000]
    assert tested >= 10, f"only {tested} operations found in /openapi.json"
    assert not failures, "\n\n".join(f"{label}\n{text}" for label, text in failures.items())
