"""Property: no input reaches a 5xx, and a refused call stores nothing.

The OpenAPI fuzzer generates values its schema allows; this one throws what a schema does not
describe at every endpoint: lone surrogates, NUL and other control characters (in values and
keys), numbers at and past the float limits (1e308, 5e-324, the JSON text 1e309 and 400-digit
integers), nesting from just inside to far past the parser's limit, and duplicate keys. Each
generated body is a valid body of the endpoint with one part replaced, so the fault sits at
every depth. Query strings, path ids and report links get the same text. Both backends (a NUL
only broke PostgreSQL). Bounded: a fixed number of derandomized examples per endpoint.
"""

from __future__ import annotations

import json
from typing import Any
from urllib.parse import quote

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from service import create_app
from service.engine import compute
from service.store import jobs
from service.store import tokens as token_store
from service.store.db import session_scope
from service.store.models import ApiToken, AuditEvent, Exploration, Request, Rerun, TokenSpend

pytestmark = pytest.mark.slow

TABLES = (Request, Exploration, AuditEvent, Rerun, TokenSpend, ApiToken)

NASTY = [
    "\ud800",
    "x\udfffy",
    "\x00",
    "a\x00b",
    "\x1b[31m",
    "\x7f",
    "\u0085",
    "\u2028",
    "\ufeff",
    "é",
    "🙂",
    "",
    "   ",
    "a" * 400,
]
TEXT = st.one_of(
    st.sampled_from(NASTY),
    st.text(max_size=12),
    st.lists(st.one_of(st.sampled_from(NASTY), st.text(max_size=3)), max_size=4).map("".join),
)
FLOAT_EDGES = [
    1e308,
    -1e308,
    1.7976931348623157e308,
    5e-324,
    -5e-324,
    1e-320,
    2.2250738585072014e-308,
    1e-300,
    0.0,
    -0.0,
    2**53,
    2**63,
    10**30,
    -(10**30),
]
NUMBER = st.one_of(
    st.sampled_from(FLOAT_EDGES),
    st.floats(allow_nan=False, allow_infinity=False),
    st.integers(min_value=-(2**70), max_value=2**70),
)
# JSON text Python would parse to inf, a huge int or a denormal; and nesting around the limit.
RAW = st.one_of(
    st.sampled_from(["1e309", "-1e309", "1" + "0" * 400, "1e-400", "-0", "9" * 30]),
    st.sampled_from([60, 64, 65, 200, 3000]).map(lambda d: "[" * d + "]" * d),
    st.sampled_from([63, 70, 3000]).map(lambda d: '{"a":' * d + "1" + "}" * d),
)
LEAF = st.one_of(TEXT, NUMBER, st.booleans(), st.none(), st.just([]), st.just({}))


def _paths(value: Any, prefix: tuple = ()) -> list[tuple]:
    out = [prefix]
    if isinstance(value, dict):
        for key, item in value.items():
            out += _paths(item, (*prefix, key))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            out += _paths(item, (*prefix, index))
    return out


@st.composite
def mutated(draw, valid: dict) -> str:
    """JSON text of ``valid`` with one part replaced (or a key added or repeated)."""
    body = json.loads(json.dumps(valid))
    raw_text = None
    how = draw(st.sampled_from(["value", "raw", "key", "duplicate"]))
    paths = [p for p in _paths(body) if p]
    path = draw(st.sampled_from(paths))
    parent = body
    for key in path[:-1]:
        parent = parent[key]
    if how == "value":
        parent[path[-1]] = draw(LEAF)
    elif how == "raw":
        raw_text = draw(RAW)
        parent[path[-1]] = "__RAW__"
    elif how == "key" and isinstance(parent, dict):
        parent[draw(TEXT)] = draw(LEAF)
    text = json.dumps(body)  # ensure_ascii: a lone surrogate travels as its \\u escape
    if raw_text is not None:
        text = text.replace('"__RAW__"', raw_text, 1)
    if how == "duplicate":
        first = next(iter(body))
        text = "{" + json.dumps(first) + ": " + json.dumps(draw(LEAF)) + ", " + text[1:]
    return text


REQUEST = {
    "protocol": {"id": "NGH-2025-031", "title": "Early mobilisation after hip fracture surgery"},
    "requester": {
        "name": "Dr. Amara Okafor",
        "email": "a.okafor@northbridge-general.example",
        "department": "Orthopaedics",
    },
    "deadline": "2025-09-30",
    "notes": "Primary outcome: 6-minute walk distance at 12 weeks.",
    "effect_source": "SD from the 2024 audit of clinic visits",
    "question": {
        "outcome": "continuous",
        "layout": "two_groups",
        "find": "sample_size",
        "effect": {"difference": 0.5},
        "assumptions": {"sd": 1.0},
        "adjustments": {"dropout": 0.1, "cluster": {"mean_size": 5, "icc": 0.05}},
    },
    "explorations": [{"type": "sensitivity_grid", "grid": {"effect.difference": [0.4, 0.5]}}],
}
PLAIN = {k: v for k, v in REQUEST.items() if k != "explorations"}
SIMULATED = {
    "outcome": "ordinal",
    "layout": "two_groups",
    "find": "power",
    "sample_size": {"total": 80},
    "method": "simulation",
    "simulation": {
        "replicates": 200,
        "seed": 731,
        "data": {
            "control": {"family": "lognormal", "mu": 1.0, "sigma": 0.8},
            "treatment": {"family": "lognormal", "mu": 1.5, "sigma": 0.8},
        },
    },
}
# (role, path template, a valid body)
BODIES = [
    ("intake", "/v1/requests", REQUEST),
    ("intake", "/v1/requests", {**PLAIN, "question": SIMULATED}),
    ("statistician", "/v1/calculations", {"question": REQUEST["question"]}),
    (
        "statistician",
        "/v1/requests/{id}/explorations",
        {"type": "sensitivity_grid", "grid": {"alpha": [0.05, 0.01]}},
    ),
    ("statistician", "/v1/requests/{id}/comments", {"text": "Which SD source?"}),
    ("statistician", "/v1/requests/{id}/assign", {"to": "j.moreau"}),
    ("statistician", "/v1/requests/{id}/approve", {"note": "Checked."}),
    ("statistician", "/v1/requests/{id}/return", {"note": "Which SD?"}),
    ("statistician", "/v1/requests/{id}/cancel", {"reason": "duplicate"}),
    ("auditor", "/v1/requests/{id}/reruns", {"note": "yearly check"}),
    ("admin", "/v1/tokens", {"role": "intake", "name": "front desk"}),
]
QUERY_KEYS = [
    "status",
    "protocol_id",
    "requester",
    "outcome",
    "layout",
    "limit",
    "cursor",
    "submitted_from",
]


@pytest.fixture
def target(settings):
    app = create_app(dict(settings, RATE_LIMIT="1000000/minute"))
    sessions = app.extensions["sizewise"]["sessions"]
    headers = {}
    with session_scope(sessions) as session:
        for role in ("intake", "statistician", "auditor", "admin"):
            headers[role] = {
                "Authorization": f"Bearer {token_store.create_token(session, role, role)[1]}"
            }
    client = app.test_client()
    r = client.post("/v1/requests", json=PLAIN, headers=headers["intake"])
    assert r.status_code == 202, r.get_json()
    request_id = r.get_json()["id"]
    with session_scope(sessions) as session:
        assert jobs.claim(session, "request", request_id, "w", 60, 3)
        record = compute(session.get(Request, request_id).question)
        assert jobs.finish_request(session, request_id, "w", record)
    yield app, client, headers, request_id
    app.extensions["sizewise"]["engine"].dispose()


def _enc(text: str) -> str:
    return quote(text.encode("utf-8", "surrogatepass"), safe="")


def _rows(app) -> dict[str, int]:
    with session_scope(app.extensions["sizewise"]["sessions"]) as session:
        return {
            m.__tablename__: session.scalar(select(func.count()).select_from(m)) for m in TABLES
        }


def _check(app, call) -> None:
    before = _rows(app)
    response = call()
    assert response.status_code < 500, response.get_data(as_text=True)[:500]
    if response.status_code >= 400:
        assert _rows(app) == before, response.get_data(as_text=True)[:300]


BOUNDED = settings(
    max_examples=15,
    deadline=None,
    derandomize=True,
    suppress_health_check=[
        HealthCheck.function_scoped_fixture,
        HealthCheck.too_slow,
        HealthCheck.data_too_large,
    ],
)


@pytest.mark.parametrize("role,path,valid", BODIES, ids=[f"{r}:{p}" for r, p, _ in BODIES])
def test_no_body_reaches_a_5xx_and_refusals_store_nothing(target, role, path, valid):
    app, client, headers, request_id = target

    @BOUNDED
    @given(text=mutated(valid))
    def post(text: str) -> None:
        _check(
            app,
            lambda: client.post(
                path.format(id=request_id),
                data=text,
                content_type="application/json",
                headers=headers[role],
            ),
        )

    post()


def test_no_query_path_or_link_reaches_a_5xx(target):
    app, client, headers, request_id = target

    @BOUNDED
    @given(
        query=st.dictionaries(
            st.one_of(st.sampled_from(QUERY_KEYS), TEXT),
            st.one_of(TEXT, NUMBER.map(str)),
            max_size=3,
        ),
        ident=TEXT,
        link=st.one_of(TEXT, st.tuples(TEXT, TEXT, TEXT).map(".".join)),
    )
    def probe(query: dict, ident: str, link: str) -> None:
        statistician = headers["statistician"]
        # Raw bytes as an attacker would send them: a surrogate travels as %ED%A0%80.
        qs = "&".join(f"{_enc(k)}={_enc(v)}" for k, v in query.items())
        ident, link = _enc(ident), _enc(link)
        _check(app, lambda: client.get(f"/v1/requests?{qs}", headers=statistician))
        _check(app, lambda: client.get(f"/v1/staff/requests?{qs}", headers=statistician))
        for path in (
            f"/v1/requests/{ident}",
            f"/v1/requests/{request_id}/explorations/{ident}",
            f"/v1/requests/{request_id}/reruns/{ident}",
        ):
            _check(app, lambda p=path: client.get(p, headers=headers["intake"]))
        _check(
            app,
            lambda: client.post(f"/v1/tokens/{ident}/revoke", headers=headers["admin"]),
        )
        _check(
            app,
            lambda: client.get(f"/v1/requests/{request_id}/report?link={link}"),
        )

    probe()
