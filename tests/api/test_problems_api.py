"""Every endpoint answers bad input with application/problem+json naming the field."""

from __future__ import annotations

import pytest

MISSING = "0" * 32
PROBLEM = "application/problem+json"


def _is_problem(response, status: int) -> dict:
    assert response.status_code == status, response.get_data(as_text=True)
    assert response.mimetype == PROBLEM
    body = response.get_json()
    assert {"type", "title", "status", "detail", "instance"} <= set(body)
    assert body["status"] == status and "Traceback" not in body["detail"]
    return body


@pytest.fixture
def request_id(api) -> str:
    return api.submit().get_json()["id"]


# (path template, a valid body or None when the endpoint takes none); the default client is a
# statistician's, reruns are created by auditors (see _headers).
BODY_ENDPOINTS = [
    (
        "/v1/calculations",
        {
            "question": {
                "outcome": "continuous",
                "layout": "two_groups",
                "find": "sample_size",
                "effect": {"difference": 0.5},
                "assumptions": {"sd": 1},
            }
        },
    ),
    ("/v1/requests", None),
    ("/v1/requests/{id}/cancel", {}),
    ("/v1/requests/{id}/assign", {"to": "j.moreau"}),
    ("/v1/requests/{id}/comments", {"text": "ok"}),
    ("/v1/requests/{id}/approve", {"note": "ok"}),
    ("/v1/requests/{id}/return", {"note": "ok"}),
    ("/v1/requests/{id}/reruns", {}),
]


def _role(path: str) -> str:
    return "auditor" if path.endswith("/reruns") else "statistician"


@pytest.fixture
def as_role(auth):
    """Headers of the role allowed to POST ``path``."""
    return lambda path: auth(_role(path))


@pytest.fixture
def post_raw(client, as_role, request_id):
    """POST raw ``data`` with ``content_type`` to ``path`` as the role allowed there."""
    return lambda path, data, content_type: client.post(
        path.format(id=request_id), data=data, content_type=content_type, headers=as_role(path)
    )


@pytest.mark.parametrize("path,_body", BODY_ENDPOINTS)
def test_malformed_json(post_raw, path, _body):
    r = post_raw(path, "{not json", "application/json")
    assert "not valid JSON" in _is_problem(r, 400)["detail"]


@pytest.mark.parametrize("path,_body", BODY_ENDPOINTS)
def test_wrong_content_type(post_raw, path, _body):
    r = post_raw(path, "to=j.moreau", "text/plain")
    assert "text/plain" in _is_problem(r, 415)["detail"]


@pytest.mark.parametrize("path,body", BODY_ENDPOINTS)
def test_unknown_field(api, as_role, request_id, path, body):
    body = dict(body if body is not None else api.request_body(), colour="teal")
    r = api.client.post(path.format(id=request_id), json=body, headers=as_role(path))
    errors = _is_problem(r, 422)["errors"]
    assert errors["colour"][0].startswith("unknown field; allowed:")


@pytest.mark.parametrize("path,body", BODY_ENDPOINTS)
def test_body_must_be_an_object(client, as_role, request_id, path, body):
    r = client.post(path.format(id=request_id), json=[1, 2], headers=as_role(path))
    assert _is_problem(r, 422)["errors"] == {"body": ["must be a JSON object"]}


@pytest.mark.parametrize("path,body", [e for e in BODY_ENDPOINTS if "{id}" in e[0]])
def test_unknown_request_id(client, as_role, path, body):
    for request_id in (MISSING, "not-an-id"):
        r = client.post(path.format(id=request_id), json=body, headers=as_role(path))
        assert request_id in _is_problem(r, 404)["detail"]


@pytest.mark.parametrize(
    "path", ["/v1/requests/{id}", "/v1/requests/{id}/reruns", "/v1/requests/{id}/reruns/" + MISSING]
)
def test_unknown_id_on_reads(client, path):
    _is_problem(client.get(path.format(id=MISSING)), 404)


@pytest.mark.parametrize(
    "query,field",
    [
        ("status=done", "query.status"),
        ("outcome=two_medians", "query.outcome"),
        ("layout=stepped_wedge", "query.layout"),
        ("cell=continuous", "query.cell"),
        ("requester=not-an-email", "query.requester"),
        ("submitted_from=yesterday", "query.submitted_from"),
        ("submitted_from=2025-03-02&submitted_to=2025-03-01", "query.submitted_to"),
        ("limit=0", "query.limit"),
        ("limit=two", "query.limit"),
        ("limit=101", "query.limit"),
        ("limit=1&limit=2", "query.limit"),
        ("cursor=not-a-cursor", "query.cursor"),
        ("page=2", "query.page"),
        ("sort=newest", "query.sort"),
    ],
)
def test_bad_list_query(client, query, field):
    errors = _is_problem(client.get(f"/v1/requests?{query}"), 422)["errors"]
    assert list(errors) == [field]


@pytest.mark.parametrize(
    "path",
    [
        "/v1/catalogue",
        "/v1/catalogue/question.schema.json",
        "/v1/requests/{id}",
    ],
)
def test_query_on_endpoints_without_parameters(client, request_id, path):
    r = client.get(path.format(id=request_id) + "?verbose=1")
    assert _is_problem(r, 422)["errors"] == {"query.verbose": ["unknown parameter"]}


def test_question_errors_are_keyed_under_question(api):
    body = api.request_body(api.question_body(alpha=1.5))
    errors = _is_problem(api.client.post("/v1/requests", json=body), 422)["errors"]
    assert list(errors) == ["question.alpha"] and "1.5" in errors["question.alpha"][0]


def test_one_sided_direction_against_the_effect_is_refused_on_its_field(api):
    question = api.question_body(
        alternative="one-sided",
        effect={"difference": -5.0},
        assumptions={"sd": 12.0},
        hypothesis={"higher_is_better": True},
    )
    errors = _is_problem(api.client.post("/v1/requests", json=api.request_body(question)), 422)[
        "errors"
    ]
    assert list(errors) == ["question.hypothesis.higher_is_better"]
    assert "effect.difference" in errors["question.hypothesis.higher_is_better"][0]


def test_invalid_requester_names_field_and_value(api):
    body = api.request_body(requester={"name": "", "email": "okafor", "department": None})
    errors = _is_problem(api.client.post("/v1/requests", json=body), 422)["errors"]
    assert errors["requester.email"] == ["must be an e-mail address; got 'okafor'"]
    assert errors["requester.name"] == ["must be 1 to 200 characters long"]


def test_bad_idempotency_key_header(api):
    r = api.client.post("/v1/requests", json=api.request_body(), headers={"Idempotency-Key": "a b"})
    assert list(_is_problem(r, 422)["errors"]) == ["headers.Idempotency-Key"]


def test_body_too_large(app, api):
    limit = app.config["MAX_CONTENT_LENGTH"]
    body = api.request_body(notes="x" * limit)
    _is_problem(api.client.post("/v1/requests", json=body), 413)


def test_method_not_allowed_and_unknown_path(client):
    r = client.delete("/v1/requests")
    _is_problem(r, 405)
    assert "POST" in r.headers["Allow"]
    _is_problem(client.get("/v1/nothing-here"), 404)


def test_unexpected_error_is_500_without_traceback(app, client, monkeypatch):
    from service.api import auth

    @app.get("/boom")
    def boom():
        raise RuntimeError("secret internal detail")

    # A route missing from the access table is refused; this one is let in on purpose.
    monkeypatch.setitem(auth.ACCESS, "boom", frozenset({"statistician"}))

    body = _is_problem(client.get("/boom"), 500)
    assert "secret" not in body["detail"]


def test_database_outage_is_503(tmp_path):
    from service import create_app

    app = create_app(
        {
            "DATABASE_URL": "postgresql+psycopg://postgres@127.0.0.1:1/none",
            "BROKER_URL": f"filesystem://{tmp_path}",
        }
    )
    # Checking the token needs the database, so even a well-formed token gets the 503.
    r = app.test_client().get("/v1/requests", headers={"Authorization": "Bearer sw_" + "x" * 43})
    assert r.status_code == 503 and r.mimetype == PROBLEM
    assert "database" in r.get_json()["detail"]


QUESTION = BODY_ENDPOINTS[0][1]["question"]


@pytest.mark.parametrize(
    "question,path",
    [
        # Keys a form could not turn into a plain name still land at their own path.
        ({**QUESTION, "x-y": 1}, "question.x-y"),
        ({**QUESTION, "a.b": 1}, "question.a.b"),
        ({**QUESTION, "question": 1}, "question.question"),
        ({**QUESTION, "effect": {"difference": 0.5, "a b": 1}}, "question.effect.a b"),
        ({**QUESTION, "effect": {"difference": 0.5, "zeta": 1}}, "question.effect.zeta"),
        (
            {**QUESTION, "method": "simulation", "simulation": {"seed": 7, "b-c": 2}},
            "question.simulation.b-c",
        ),
    ],
)
def test_an_unknown_question_key_is_reported_at_its_own_path(api, client, question, path):
    for url, body in (
        ("/v1/calculations", {"question": question}),
        ("/v1/requests", api.request_body(question)),
    ):
        errors = _is_problem(client.post(url, json=body), 422)["errors"]
        assert list(errors) == [path], (url, errors)
        assert errors[path][0].startswith("unknown field"), errors


def test_the_question_s_own_errors_stay_on_the_question(client):
    errors = _is_problem(client.post("/v1/calculations", json={"question": 5}), 422)["errors"]
    assert list(errors) == ["question"]
