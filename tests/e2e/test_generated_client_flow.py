"""An integrator's client, generated from the served document alone, drives the whole flow.

The embedded default runs as `make run` starts it (gunicorn API + a Celery worker process, a
SQLite file and the folder broker; see ``live_service``). ``/openapi.json`` is fetched without a
token, openapi-python-client generates a Python package from it in strict mode
(``--fail-on-warning``) into a temporary folder, and the test imports that package and uses
nothing else of the project to talk to the service: submit, poll, read the typed result,
retry with the same Idempotency-Key, read a problem+json error, list with filters, review
(four eyes), an auditor's rerun, and a signed report link opened without a token.

The generated code lives only in pytest's temporary folder; it is never committed.
"""

from __future__ import annotations

import importlib
import json
import os
import subprocess
import sys
import time
import uuid
from pathlib import Path
from types import SimpleNamespace
from urllib.request import urlopen

import pytest
from statsmodels.stats.power import TTestIndPower

pytestmark = pytest.mark.slow

BIN = Path(sys.executable).parent
# The generator's one setting: how to read the curves' image bodies (it reads JSON, text and
# bytes only). The package name and everything else come from the document.
GENERATOR_CONFIG = Path(__file__).resolve().parents[1] / "api" / "openapi_client_config.yaml"

# Invented Northbridge General Hospital studies.
PROTOCOL = {"id": f"NGH-OAPI-{uuid.uuid4().hex[:6]}", "title": "Heart-failure nurse calls"}
REQUESTER = {
    "name": "Dr. Sunita Rao",
    "email": "s.rao@northbridge.example",
    "department": "Cardiology",
}
ANALYTIC = {
    "outcome": "continuous",
    "layout": "two_groups",
    "find": "sample_size",
    "effect": {"difference": 0.5},
    "assumptions": {"sd": 1.0},
}
SIMULATED = {
    "outcome": "continuous",
    "layout": "two_groups",
    "find": "power",
    "sample_size": {"per_group": [30, 30]},
    "effect": {"difference": 0.5},
    "assumptions": {"sd": 1.0},
    "method": "simulation",
    "simulation": {"replicates": 2000, "seed": 20261202, "chunk_size": 500},
}


@pytest.fixture(scope="module")
def sdk(live_service, tmp_path_factory):
    """The package generated from the live document, imported from a temporary folder."""
    folder = tmp_path_factory.mktemp("generated")
    with urlopen(f"{live_service['url']}/openapi.json", timeout=30) as reply:  # no token
        assert reply.status == 200
        assert reply.headers.get_content_type() == "application/json"
        document = json.loads(reply.read())
    (folder / "openapi.json").write_text(json.dumps(document))
    done = subprocess.run(
        [
            str(BIN / "openapi-python-client"),
            "generate",
            "--path",
            str(folder / "openapi.json"),
            "--config",
            str(GENERATOR_CONFIG),
            "--output-path",
            str(folder / "client"),
            "--fail-on-warning",
        ],
        cwd=folder,
        # Its post-generation hooks run ruff, which is installed beside this interpreter.
        env={**os.environ, "PATH": f"{BIN}{os.pathsep}{os.environ.get('PATH', '')}"},
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stdout + done.stderr
    assert "Warning" not in done.stdout + done.stderr, done.stdout + done.stderr
    (package,) = [p.parent.name for p in (folder / "client").glob("*/client.py")]
    # One module per operation, in a folder per tag: found by the operation's name alone.
    operations = {
        path.stem: f"{package}.api.{path.parent.name}.{path.stem}"
        for path in (folder / "client" / package / "api").glob("*/*.py")
        if path.stem != "__init__"
    }
    sys.path.insert(0, str(folder / "client"))
    try:
        yield SimpleNamespace(
            root=importlib.import_module(package),
            op=lambda name: importlib.import_module(operations[name]),
            models=importlib.import_module(f"{package}.models"),
        )
    finally:
        sys.path.remove(str(folder / "client"))
        for name in [m for m in sys.modules if m == package or m.startswith(package + ".")]:
            del sys.modules[name]


def _clients(sdk, live_service) -> SimpleNamespace:
    root, url, secrets = sdk.root, live_service["url"], live_service["secrets"]

    def authed(who: str):
        return root.AuthenticatedClient(base_url=url, token=secrets[who], timeout=30.0)

    return SimpleNamespace(
        office=authed("intake"),
        statistician=authed("statistician"),
        auditor=authed("auditor"),
        anonymous=root.Client(base_url=url, timeout=30.0),
    )


def _body(sdk, question: dict):
    models = sdk.models
    return models.RequestCreate(
        protocol=models.Protocol(**PROTOCOL),
        requester=models.Requester(**REQUESTER),
        # One question type per cell (outcome × layout), as the document names them.
        question=models.QuestionContinuousTwoGroups.from_dict(question),
    )


def _poll(get, until, timeout: float = 90.0, log: Path | None = None):
    """Call ``get()`` every quarter second until ``until(answer)``; the last answer."""
    deadline = time.monotonic() + timeout
    while True:
        answer = get()
        if until(answer):
            return answer
        if time.monotonic() > deadline:
            tail = log.read_text(errors="replace")[-3000:] if log else ""
            raise AssertionError(f"still {answer!r} after {timeout} s\n{tail}")
        time.sleep(0.25)


def test_an_integrator_drives_the_flow_with_a_generated_client(sdk, live_service):
    c = _clients(sdk, live_service)
    models, op = sdk.models, sdk.op

    # -- submit a simulation; the worker computes it -------------------------------------
    key = f"ngh-oapi-{uuid.uuid4().hex}"
    first = op("requests_submit_request").sync_detailed(
        client=c.office, body=_body(sdk, SIMULATED), idempotency_key=key
    )
    assert first.status_code == 202, first.content
    request = first.parsed
    assert isinstance(request, models.Request)
    assert request.status in (models.RequestStatus.QUEUED, models.RequestStatus.RUNNING)

    # -- the same key and body again: the same request, not a second one ----------------
    again = op("requests_submit_request").sync_detailed(
        client=c.office, body=_body(sdk, SIMULATED), idempotency_key=key
    )
    assert again.status_code == 200, again.content
    assert again.parsed.id == request.id
    # The same key with another body is refused, naming the header.
    other = op("requests_submit_request").sync_detailed(
        client=c.office, body=_body(sdk, ANALYTIC), idempotency_key=key
    )
    assert other.status_code == 422, other.content
    assert "headers.Idempotency-Key" in other.parsed.errors.to_dict()

    # -- poll until computed, then read the typed result --------------------------------
    def detail():
        return op("requests_get_request").sync(request_id=request.id, client=c.office)

    done = _poll(
        detail,
        lambda r: r.status not in (models.RequestStatus.QUEUED, models.RequestStatus.RUNNING),
        log=live_service["worker_log"],
    )
    assert done.status == models.RequestStatus.COMPUTED, done.error
    record = done.result
    assert isinstance(record, models.ResultRecord)
    assert record.sample_size.per_group == [30, 30]
    # formula: power of the pooled t test, n = 30 per group, d = 0.5, two-sided alpha .05, by
    # the noncentral t (Cohen 1988, eq. 2.3.1), recomputed with statsmodels TTestIndPower;
    # Cohen 1988 Table 2.3.5 prints .47 (published). The Monte Carlo estimate (2,000
    # replicates) is within 4 of its own standard errors of it.
    exact = TTestIndPower().power(effect_size=0.5, nobs1=30, alpha=0.05, ratio=1.0)
    assert round(exact, 2) == 0.48
    assert record.power.replicates == 2000
    assert abs(record.power.estimate - exact) < 4 * record.power.mcse
    assert record.power.analytic == pytest.approx(exact, abs=1e-6)
    assert record.reproducibility.seed == SIMULATED["simulation"]["seed"]

    # -- a closed-form question is answered at submission --------------------------------
    analytic = op("requests_submit_request").sync_detailed(
        client=c.office, body=_body(sdk, ANALYTIC)
    )
    assert analytic.status_code == 202, analytic.content
    assert analytic.parsed.status == models.RequestStatus.COMPUTED
    # published: Cohen 1988, Table 2.4.1: d = 0.5, two-sided alpha .05, power .80 -> 64 per group.
    assert analytic.parsed.result.sample_size.per_group == [64, 64]

    # -- a problem+json error names the field --------------------------------------------
    bad = dict(ANALYTIC, assumptions={"sd": -1.0})
    refused = op("requests_submit_request").sync_detailed(client=c.office, body=_body(sdk, bad))
    assert refused.status_code == 422
    assert refused.headers["content-type"].startswith("application/problem+json")
    problem = refused.parsed
    assert isinstance(problem, models.Problem) and problem.status == 422
    assert list(problem.errors.to_dict()) == ["question.assumptions.sd"], problem.errors
    assert problem.instance == "/v1/requests"

    # -- list with filters ----------------------------------------------------------------
    page = op("requests_list_requests").sync(
        client=c.statistician,
        protocol_id=PROTOCOL["id"],
        status=models.RequestStatus.COMPUTED,
        limit=10,
    )
    assert isinstance(page, models.RequestPage)
    assert {item.id for item in page.items} == {request.id, analytic.parsed.id}
    assert all(item.protocol.id == PROTOCOL["id"] for item in page.items)
    only = op("requests_list_requests").sync(
        client=c.statistician, protocol_id=PROTOCOL["id"], limit=1
    )
    assert len(only.items) == 1 and only.next_  # a next link to the second page
    bad_page = op("requests_list_requests").sync_detailed(
        client=c.statistician, protocol_id=PROTOCOL["id"], limit=0
    )
    assert bad_page.status_code == 422 and "query.limit" in bad_page.parsed.errors.to_dict()

    # -- review: assign, comment, approve (four eyes), return ----------------------------
    assigned = op("requests_assign_request").sync(
        request_id=request.id, client=c.statistician, body=models.Assign(to="j.moreau")
    )
    assert isinstance(assigned, models.Request), assigned
    comment = op("requests_comment_request").sync(
        request_id=request.id,
        client=c.statistician,
        body=models.Comment(text="SD taken from the 2024 pilot; fine."),
    )
    assert isinstance(comment, models.AuditEvent), comment
    approved = op("requests_approve_request").sync(
        request_id=request.id,
        client=c.statistician,
        body=models.ReviewNote(note="Assumptions checked against the pilot."),
    )
    assert isinstance(approved, models.Request), approved
    assert approved.status == models.RequestStatus.APPROVED
    # Approved is final: a return is a 409 naming the current status.
    late = op("requests_return_request").sync_detailed(
        request_id=request.id, client=c.statistician, body=models.ReviewNote(note="Too late.")
    )
    assert late.status_code == 409 and late.parsed.status == 409
    # Four eyes: a statistician may not approve what their own token submitted.
    own = op("requests_submit_request").sync(client=c.statistician, body=_body(sdk, ANALYTIC))
    refused = op("requests_approve_request").sync_detailed(
        request_id=own.id, client=c.statistician, body=models.ReviewNote(note="Mine.")
    )
    assert refused.status_code == 403 and refused.parsed.type_.endswith("four-eyes")
    returned = op("requests_return_request").sync(
        request_id=analytic.parsed.id,
        client=c.statistician,
        body=models.ReviewNote(note="State the dropout allowance."),
    )
    assert returned.status == models.RequestStatus.RETURNED

    # -- the auditor's rerun comes out identical -----------------------------------------
    started = op("requests_create_rerun").sync_detailed(
        request_id=request.id, client=c.auditor, body=models.RerunCreate(note="quarterly check")
    )
    assert started.status_code == 202, started.content
    rerun = _poll(
        lambda: op("requests_get_rerun").sync(
            request_id=request.id, rerun_id=started.parsed.id, client=c.auditor
        ),
        lambda r: r.status not in (models.JobStatus.QUEUED, models.JobStatus.RUNNING),
        log=live_service["worker_log"],
    )
    assert rerun.status == models.JobStatus.DONE, rerun
    assert rerun.identical is True and rerun.differences == []
    assert rerun.record_sha256 == record.reproducibility.record_sha256

    # -- a signed report link opens the report and both curves without a token ----------
    link = op("reports_create_report_link").sync(request_id=request.id, client=c.office)
    assert isinstance(link, models.ReportLink), link
    assert link.url.startswith(f"{live_service['url']}/v1/requests/{request.id}/report?link=")
    secret = link.url.split("?link=", 1)[1]
    page = op("reports_request_report").sync_detailed(
        request_id=request.id, client=c.anonymous, link=secret
    )
    assert page.status_code == 200
    assert page.headers["content-type"].startswith("text/html")
    assert PROTOCOL["id"] in page.content.decode()
    svg = op("reports_curve_svg").sync_detailed(
        request_id=request.id, client=c.anonymous, link=secret
    )
    assert svg.status_code == 200 and svg.headers["content-type"].startswith("image/svg+xml")
    assert b"<svg" in svg.content
    png = op("reports_curve_png").sync_detailed(
        request_id=request.id, client=c.anonymous, link=secret
    )
    assert png.status_code == 200 and png.headers["content-type"] == "image/png"
    assert png.content.startswith(b"\x89PNG\r\n\x1a\n")
    # The absolute URL itself, followed as a browser would, opens the same page.
    followed = c.anonymous.get_httpx_client().get(link.url)
    assert followed.status_code == 200 and PROTOCOL["id"] in followed.text
    # Without the link (and without a token) the report is refused.
    bare = op("reports_request_report").sync_detailed(request_id=request.id, client=c.anonymous)
    assert bare.status_code == 401 and bare.parsed.status == 401
