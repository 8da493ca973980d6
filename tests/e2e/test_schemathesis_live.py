"""schemathesis against the running embedded default, every check on, bounded.

The document is read from the live service's ``/openapi.json`` (no token), and every operation
gets positive cases (data the document says is valid: the server must accept it, answering 2xx,
or 401/403/404/409/429 where the document says so) and negative cases (data the document says
is invalid: the server must refuse it with a 4xx). Every answer is checked against the
document: no 5xx, a documented status, content type, headers and body schema, 401 without the
token, 405 for methods the path does not have. Half the positive cases of an operation with a
``request_id`` in its path use a real computed request, so success answers are checked too.

Positive data: the document states what a complete question requires (by aim, find and the
cell's forms), text without control characters, the filters' words. What JSON Schema cannot
state is named in ``_beyond_the_document`` with its reason (values compared with each other, the
engine's own answer, the deployment's budget, what depends on a stored request, a token name's
Unicode categories); any other refusal of document-valid data fails the test.

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
from schemathesis.core.failures import Failure, FailureGroup
from schemathesis.generation import GenerationMode

from service.schemas.json_schema import group_count
from service.schemas.vocabulary import cell_of

pytestmark = pytest.mark.slow

MAX_EXAMPLES = 10
# schemathesis' code of positive data rejected (the check positive_data_acceptance).
POSITIVE_REJECTED = "ST202"

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


VALUE_RULES = (
    "must sum to 1",  # category probabilities: their sum
    "must be in (alpha, 1)",  # target_power against alpha (posted or the aim's default)
    "a cell of the paired table would be negative",  # a correlation against two proportions
    "every group needs at least 2",  # a total split by the allocation ratio
)
ENGINE_REFUSALS = (
    "the question cannot be computed",
    "the engine cannot answer this question as posed",
)


def _beyond_the_document(operation, case, response) -> bool:
    """A refusal of document-valid data by a rule JSON Schema cannot state (each named here,
    and described in the document's prose); every other refusal is a failure."""
    if response.status_code != 422:
        return False
    problem = response.json() or {}
    errors = problem.get("errors") or {}
    body = case.body if isinstance(case.body, dict) else {}
    if str(problem.get("detail", "")).startswith(ENGINE_REFUSALS):
        # Whether the engine can answer (a power within reach, numbers inside double
        # precision) depends on all the numbers together: the engine's answer, not a rule a
        # schema can state.
        return True
    if "budget" in problem and "estimate" in problem:
        # The simulation budget is the deployment's setting (SIZEWISE_SIMULATION_BUDGET), and
        # an exploration's cost depends on the stored request.
        return True
    if operation.path == "/v1/tokens" and operation.method.upper() == "POST":
        # "Printable" (str.isprintable) excludes Unicode categories (format, private use,
        # unassigned, separators) that an ECMA-262 pattern without the u flag cannot name; the
        # pattern says the control-character part, the description the rest.
        name = body.get("name")
        return isinstance(name, str) and not name.strip().isprintable() and set(errors) == {"name"}
    question = body.get("question") if isinstance(body.get("question"), dict) else {}
    if errors and all(
        all(any(rule in message for rule in VALUE_RULES) for message in messages)
        for messages in errors.values()
    ):
        # Rules on several values at once (VALUE_RULES), which JSON Schema cannot compare; the
        # fields' descriptions say them.
        return True
    rounding = errors.get("question.allocation_rounding") or []
    if set(errors) == {"question.allocation_rounding"} and all(
        "fraction with denominator at most 100" in m or "simulated search" in m or "cluster" in m
        for m in rounding
    ):
        # exact_ratio needs a ratio that is a fraction with a small denominator, an analytic
        # answer and no clusters: values and blocks together, said in the field's description.
        return True
    target = errors.get("question.target_power") or []
    if set(errors) == {"question.target_power"} and all(
        message.startswith("must be in (alpha, 1)") for message in target
    ):
        # target_power above alpha (posted or the aim's default): JSON Schema compares no two
        # members' values; the field's description says it.
        return True
    design = cell_of(question) if question else None
    if design is not None and group_count(design) is None:
        # k groups, or treatments against a control: one number per group, as many as the
        # question's group_means, group_count or treatment_count say; JSON Schema cannot tie
        # an array's length to another member's value (the document says it in words).
        return set(errors) == {"question.sample_size.per_group"} and all(
            message.startswith("must list") for message in errors["question.sample_size.per_group"]
        )
    if (
        operation.path == "/v1/requests"
        and errors
        and all(key.startswith("explorations.") for key in errors)
    ):
        # The explorations posted with a question: a grid's axes name that question's numeric
        # fields, and a robustness panel needs a tested question; both depend on the question.
        return True
    if operation.path.endswith("/explorations") and operation.method.upper() == "POST":
        # A grid's axes are the numeric fields of that request's stored question, and their
        # values ones its cell accepts: they depend on the stored request, not on the document.
        return bool(errors) and all(key.startswith("grid") for key in errors)
    return False


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
    schema = schemathesis.openapi.from_url(f"{live_service['url']}/openapi.json")
    # A body over the size limit is refused with 413, which the document lists.
    refusals = schema.config.checks.negative_data_rejection
    refusals.expected_statuses = [*refusals.expected_statuses, "413"]
    return schema


def _fuzz(operation, mode: GenerationMode, live: dict, computed_id: str, found: dict) -> None:
    """Run the operation's cases of one mode; every failure is kept, the walk goes on."""
    headers = {"Authorization": f"Bearer {live['secrets'][_role(operation)]}"}
    real_ids = mode is GenerationMode.POSITIVE and "{request_id}" in operation.path
    checks = CHECKS.get_all()

    @FUZZ
    @given(case=operation.as_strategy(generation_mode=mode), real=st.booleans())
    def run(case, real: bool) -> None:
        if real and real_ids:
            case.path_parameters["request_id"] = computed_id
        if mode is GenerationMode.POSITIVE and case.query:
            # A cursor is opaque: only one from a page's `next` link is valid, which no
            # generator can make up (422 names it). Pages without one are still fuzzed.
            case.query.pop("cursor", None)
            # submitted_to must not be before submitted_from: two parameters, which JSON Schema
            # cannot compare (the parameter's description says it); the case keeps both dates.
            start, end = case.query.get("submitted_from"), case.query.get("submitted_to")
            if isinstance(start, str) and isinstance(end, str) and end < start:
                case.query["submitted_from"], case.query["submitted_to"] = end, start
        # call_and_validate, in two steps so the report can show the answer.
        response = case.call(base_url=live["url"], headers=headers)
        try:
            case.validate_response(
                response,
                checks,
                headers=headers,
                transport_kwargs={"base_url": live["url"], "headers": dict(headers)},
            )
        except FailureGroup as group:
            failures = list(group.exceptions)
        except Failure as failure:
            failures = [failure]
        else:
            return
        for failure in failures:
            if failure.code == POSITIVE_REJECTED and _beyond_the_document(
                operation, case, response
            ):
                continue
            # The first case of each kind of failure per operation and mode; the curl line
            # reproduces it (without the token).
            answer = f"{response.status_code} {response.text[:600]}"
            found.setdefault((operation.label, mode.value, failure.code), (failure, case, answer))

    run()


@pytest.fixture(scope="module")
def walk(api_schema, live_service, computed_id) -> dict:
    """Every operation, positive and negative cases, all checks: ``{(label, mode, code): ...}``."""
    load_all_checks()
    names = {check.__name__ for check in CHECKS.get_all()}
    assert {"positive_data_acceptance", "negative_data_rejection", "ignored_auth"} <= names
    found: dict = {}
    tested = []
    # schemathesis' lazy pytest loader does not work with this pytest, so the operations are
    # walked here.
    for result in api_schema.get_all_operations():
        operation = result.ok()
        tested.append(operation.label)
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
            try:
                _fuzz(operation, mode, live_service, computed_id, found)
            except Unsatisfiable:
                # Nothing of the operation can be made invalid (no parameters, no body).
                assert mode is GenerationMode.NEGATIVE, operation.label
    assert len(tested) >= 30, f"only {len(tested)} operations in the document: {tested}"
    return found


def _report(found: dict) -> str:
    return "\n\n".join(
        f"{label} [{mode}] {code} {failure.title}\n{failure.message[:1500]}\n"
        f"{case.as_curl_command()[:1500]}\n-> {answer}"
        for (label, mode, code), (failure, case, answer) in sorted(found.items())
    )


def test_the_server_keeps_to_the_document(walk):
    """No 5xx; status, content type, headers and body as documented; invalid data refused;
    401 without a token; 405 for a method the path does not have."""
    broken = {key: value for key, value in walk.items() if key[2] != POSITIVE_REJECTED}
    assert not broken, _report(broken)


def test_data_valid_by_the_document_is_accepted(walk):
    """What the document calls valid, the server takes (2xx, or a documented 401/403/404/409)."""
    rejected = {key: value for key, value in walk.items() if key[2] == POSITIVE_REJECTED}
    assert not rejected, _report(rejected)
