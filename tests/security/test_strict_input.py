"""Inputs that used to reach a 500 (or fail later in the worker) are refused up front.

Each case below answered 500, or was accepted with 202 and then failed in the worker, before the
strict parser and the submission-time engine checks; now each is a 4xx problem document naming
where the fault is, and nothing is stored. Both backends (the NUL character only broke
PostgreSQL, which cannot store it in text).
"""

from __future__ import annotations

import json
from datetime import timedelta

import pytest
from sqlalchemy import func, select

from service.api.auth import sign_link
from service.store.db import session_scope
from service.store.models import ApiToken, AuditEvent, Exploration, Request, Rerun, TokenSpend
from service.store.types import utcnow

PROBLEM = "application/problem+json"
STORED = (Request, Exploration, AuditEvent, Rerun, TokenSpend)


def stored_rows(app) -> dict[str, int]:
    """Row counts of every table a call could write to (tokens included)."""
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        counts = {
            m.__tablename__: session.scalar(select(func.count()).select_from(m)) for m in STORED
        }
        counts["api_tokens"] = session.scalar(select(func.count()).select_from(ApiToken))
    return counts


def _post_text(client, path: str, text: str, headers=None):
    return client.post(path, data=text, content_type="application/json", headers=headers or {})


def _problem(r, status: int) -> dict:
    assert r.status_code == status, r.get_data(as_text=True)[:400]
    assert r.mimetype == PROBLEM
    return r.get_json()


@pytest.mark.parametrize(
    "path,field",
    [
        (("protocol", "title"), "protocol.title"),
        (("requester", "name"), "requester.name"),
        (("notes",), "notes"),
        (("question", "layout"), "question.layout"),
    ],
)
@pytest.mark.parametrize(
    "bad,words",
    [
        ("x\ud800y", "surrogate"),
        ("x\x00y", "U+0000"),
        ("x\x1by", "U+001B"),
    ],
)
def test_unstorable_text_is_refused_with_its_path(app, client, api, path, field, bad, words):
    body = api.request_body()
    node = body
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = bad
    before = stored_rows(app)
    # ensure_ascii writes the lone surrogate as the \ud800 escape a client would send.
    r = _post_text(client, "/v1/requests", json.dumps(body))
    problem = _problem(r, 422)
    assert words in problem["errors"][field][0]
    assert stored_rows(app) == before


def test_tab_and_newline_are_kept_in_notes(client, api):
    body = api.request_body(notes="Primary outcome:\n\t6-minute walk distance.\r\n")
    r = client.post("/v1/requests", json=body)
    assert r.status_code == 202 and r.get_json()["notes"] == body["notes"]


def test_surrogate_and_nul_in_keys_are_refused(app, client, api):
    before = stored_rows(app)
    for key in ("a\ud800", "a\x00"):
        body = api.request_body()
        body["protocol"][key] = "x"
        problem = _problem(_post_text(client, "/v1/requests", json.dumps(body)), 422)
        assert "a key contains" in problem["errors"]["protocol"][0]
    assert stored_rows(app) == before


def test_deep_nesting_under_the_size_cap_is_400(app, client, api):
    before = stored_rows(app)
    for text in ("[" * 3000 + "]" * 3000, '{"a":' * 3000 + "1" + "}" * 3000):
        problem = _problem(_post_text(client, "/v1/requests", text), 400)
        assert "at most 64" in problem["detail"]
    # Nesting just inside the limit is parsed (and then refused as a body of the wrong shape).
    body = api.request_body(notes=None)
    body["question"]["effect"] = {"difference": 0.5}
    body["question"]["assumptions"] = {"sd": 1.0}
    deep = json.dumps(body)[:-1] + ', "x": ' + "[" * 60 + "]" * 60 + "}"
    r = _post_text(client, "/v1/requests", deep)
    assert r.status_code == 422 and "x" in r.get_json()["errors"]
    assert stored_rows(app) == before


def test_duplicate_keys_are_refused(app, client, api):
    text = json.dumps(api.request_body())
    text = text.replace('"title": ', '"title": "first", "title": ', 1)
    before = stored_rows(app)
    problem = _problem(_post_text(client, "/v1/requests", text), 400)
    assert "'title' twice" in problem["detail"]
    assert stored_rows(app) == before


def test_nul_in_query_and_path_is_refused(app, client, api, auth):
    request_id = api.submit().get_json()["id"]
    r = client.get("/v1/requests", query_string={"protocol_id": "NGH\x00"})
    assert "U+0000" in _problem(r, 422)["errors"]["query.protocol_id"][0]
    # A path id holding NUL names nothing: 404 before any lookup (PostgreSQL would refuse it).
    for path in (
        f"/v1/requests/{request_id[:31]}%00",
        f"/v1/requests/{request_id}/explorations/{'a' * 31}%00",
        f"/v1/requests/{request_id}/reruns/%00",
    ):
        assert client.get(path).status_code == 404
    admin, intake = auth("admin"), auth("intake")
    before = stored_rows(app)
    assert client.post(f"/v1/tokens/{'a' * 31}%00/revoke", headers=admin).status_code == 404
    r = client.post("/v1/tokens", json={"role": "intake", "name": "x\x00"}, headers=admin)
    assert r.status_code == 422
    # The intake owner check looks the id up too.
    assert client.get(f"/v1/requests/{'a' * 31}%00", headers=intake).status_code == 404
    assert stored_rows(app) == before


def test_limit_with_thirty_digits_is_422(client):
    r = client.get("/v1/requests", query_string={"limit": "9" * 30})
    assert "from 1 to 100" in _problem(r, 422)["errors"]["query.limit"][0]
    assert client.get("/v1/requests", query_string={"limit": "100"}).status_code == 200


def test_lognormal_sigma_of_1000_is_refused_with_the_range(app, client, api):
    question = {
        "outcome": "ordinal",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"total": 80},
        "method": "simulation",
        "simulation": {
            "replicates": 1000,
            "seed": 731,
            "data": {
                "control": {"family": "lognormal", "mu": 1.0, "sigma": 1000},
                "treatment": {"family": "lognormal", "mu": 1.5, "sigma": 0.8},
            },
        },
    }
    before = stored_rows(app)
    r = client.post("/v1/requests", json=api.request_body(question))
    field = "question.simulation.data.control.sigma"
    assert "(0, 10]" in _problem(r, 422)["errors"][field][0]
    # In range but with a mean past double precision (exp(800)): refused by the moment check.
    question["simulation"]["data"]["control"] = {"family": "lognormal", "mu": 800, "sigma": 1}
    errors = _problem(client.post("/v1/requests", json=api.request_body(question)), 422)["errors"]
    assert "overflows" in errors["question.simulation.data.control.mu"][0]
    assert stored_rows(app) == before


@pytest.mark.parametrize(
    "link",
    [
        "abc.١٢٣.x",  # Arabic-Indic digits pass str.isdigit
        "a" * 32 + ".123." + "é" * 64,  # non-ASCII signature
        "a" * 32 + ".1." + "é" + "a" * 63,
        "a" * 32 + "." + "9" * 30 + "." + "a" * 64,
        "",
        "..",
    ],
)
def test_malformed_report_links_are_401(anon_client, link):
    r = anon_client.get(f"/v1/requests/{'a' * 32}/report", query_string={"link": link})
    assert _problem(r, 401)["errors"]["query.link"]


def test_signed_link_with_an_absurd_expiry_is_401(app, anon_client, api):
    request_id = api.submit().get_json()["id"]
    key = app.extensions["sizewise"]["link_key"]
    far = utcnow() + timedelta(days=365 * 7000)  # year ~9000: representable, never issued
    for expires_at in (far, utcnow() + timedelta(hours=25)):
        token = sign_link(key, request_id, expires_at)
        r = anon_client.get(f"/v1/requests/{request_id}/report", query_string={"link": token})
        assert "further ahead" in _problem(r, 401)["detail"]
    # A signed expiry past datetime's range (12 digits) is refused the same way, not a 500.
    expires = 999_999_999_999
    from service.api.auth import _signature

    token = f"{request_id}.{expires}.{_signature(key, request_id, expires)}"
    r = anon_client.get(f"/v1/requests/{request_id}/report", query_string={"link": token})
    assert _problem(r, 401)


# Questions the worker could not compute: /v1/calculations refused them, submission did not.
UNCOMPUTABLE = [
    ({"effect": {"difference": 1e308}, "assumptions": {"sd": 1.0}}, ["question.effect.difference"]),
    (
        {"effect": {"difference": 0.5}, "assumptions": {"sd": 1e-320}},
        ["question.assumptions.sd"],
    ),
    (
        {"adjustments": {"cluster": {"mean_size": 1e308, "icc": 0.05}}},
        ["question.adjustments.cluster.mean_size"],
    ),
    (
        {
            "find": "power",
            "sample_size": {"per_group": [10**9, 10**9]},
            "effect": {"difference": 1e300},
            "assumptions": {"sd": 1e-300},
        },
        ["question.effect.difference", "question.assumptions.sd"],
    ),
]


@pytest.mark.parametrize("change,fields", UNCOMPUTABLE)
def test_uncomputable_questions_are_refused_at_submission(app, client, api, change, fields):
    question = dict(api.question_body(), **change)
    # The synchronous endpoint refuses it (the engine fails in-process) ...
    assert client.post("/v1/calculations", json={"question": question}).status_code == 422
    before = stored_rows(app)
    # ... and so does submission now, before anything is stored or queued.
    problem = _problem(client.post("/v1/requests", json=api.request_body(question)), 422)
    assert sorted(problem["errors"]) == sorted(fields)
    assert "double precision" in problem["detail"]
    assert "Error" not in problem["detail"]  # words, not a Python exception name
    assert stored_rows(app) == before


def test_simulated_question_with_an_overflowing_effect_is_refused(app, client, api):
    question = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"per_group": [64, 64]},
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1e-320},
        "method": "simulation",
        "simulation": {"replicates": 200, "seed": 1},
    }
    before = stored_rows(app)
    problem = _problem(client.post("/v1/requests", json=api.request_body(question)), 422)
    assert list(problem["errors"]) == ["question.assumptions.sd"]
    assert stored_rows(app) == before


def test_ordinary_questions_in_any_unit_still_pass(client, api):
    # Grams instead of kilograms: large numbers, ordinary standardized effect.
    big = api.question_body(effect={"difference": 5000.0}, assumptions={"sd": 12000.0})
    small = api.question_body(effect={"difference": 5e-9}, assumptions={"sd": 1.2e-8})
    for question in (big, small):
        assert client.post("/v1/requests", json=api.request_body(question)).status_code == 202
    simulated = {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"per_group": [64, 64]},
        "effect": {"difference": -5.0},
        "assumptions": {"sd": 12.0},
        "method": "simulation",
        "simulation": {"replicates": 200, "seed": 1},
    }
    assert client.post("/v1/requests", json=api.request_body(simulated)).status_code == 202


def test_grid_values_no_cell_could_compute_with_are_refused(app, client, api):
    item = {"type": "sensitivity_grid", "grid": {"effect.difference": [0.5, 1e308]}}
    body = api.request_body(explorations=[item])
    before = stored_rows(app)
    problem = _problem(client.post("/v1/requests", json=body), 422)
    assert "1e+308" in problem["errors"]["explorations.0.grid.effect.difference"][0]
    assert stored_rows(app) == before
    request_id = client.post("/v1/requests", json=api.request_body()).get_json()["id"]
    before = stored_rows(app)
    grid = {"type": "sensitivity_grid", "grid": {"assumptions.sd": [1e-320, 1.0]}}
    problem = _problem(client.post(f"/v1/requests/{request_id}/explorations", json=grid), 422)
    assert list(problem["errors"]) == ["grid.assumptions.sd"]
    assert stored_rows(app) == before
