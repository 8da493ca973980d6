"""Hardening: revocable report links, security headers, owner-only files, secrets kept out of
the access log, and failures told in words. Demo data: Northbridge General Hospital, invented.
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
import re
import stat
import sys
from datetime import timedelta
from pathlib import Path

import pytest
from gunicorn.config import Config
from sqlalchemy import text

import service.cli as cli
from service.access_log import REDACTED, RedactingAccessLogger, redact_query
from service.api.auth import link_key
from service.engine.errors import describe_failure
from service.run_local import Supervisor, open_private_log
from service.store.db import make_engine, session_scope
from service.store.models import AuditEvent, Request
from workers.tasks import run_request_job

EXCEPTION_NAME = re.compile(r"\b[A-Z][A-Za-z]*(Error|Exception|Warning)\b|Traceback")


def _computed(api) -> str:
    request_id = api.submit().get_json()["id"]
    assert run_request_job(request_id, api.app.extensions["sizewise"]["config"]) == "computed"
    return request_id


def _link(api, request_id: str, role: str = "statistician") -> str:
    r = api.post(f"/v1/requests/{request_id}/report-links", role=role)
    assert r.status_code == 201, r.get_json()
    return r.get_json()["url"]


# --- revocable report links ------------------------------------------------------------------


def test_revoking_a_requests_links_stops_every_earlier_link_at_once(
    api, anon_client, database_url, monkeypatch, capsys
):
    request_id = _computed(api)
    other_id = _computed(api)
    first, second = _link(api, request_id), _link(api, request_id, role="auditor")
    other = _link(api, other_id)
    assert anon_client.get(first).status_code == 200

    r = api.post(f"/v1/requests/{request_id}/report-links/revoke", role="auditor")
    assert r.status_code == 200, r.get_json()
    assert r.get_json()["request_id"] == request_id and r.get_json()["revocations"] == 1
    for url in (first, second):
        refused = anon_client.get(url)
        assert refused.status_code == 401, url
        assert "was revoked" in refused.get_json()["detail"]
        assert refused.get_json()["errors"] == {"query.link": ["revoked"]}
        token = url.split("link=", 1)[1]
        assert (
            anon_client.get(f"/v1/requests/{request_id}/curve.svg?link={token}").status_code == 401
        )
    # Per request: another request's link still opens; a link issued after the revocation too.
    assert anon_client.get(other).status_code == 200
    fresh = _link(api, request_id)
    assert anon_client.get(fresh).status_code == 200
    # A second revocation stops the fresh one as well.
    assert api.post(f"/v1/requests/{request_id}/report-links/revoke").get_json()["revocations"] == 2
    assert anon_client.get(fresh).status_code == 401

    with session_scope(api.sessions()) as session:
        events = session.query(AuditEvent).filter(AuditEvent.request_id == request_id).all()
        actions = [e.action for e in events]
        dumped = json.dumps([e.detail for e in events])
    assert actions.count("report_link_issued") == 3 and actions.count("report_links_revoked") == 2
    for url in (first, second, fresh):  # the trail says who issued a link, never its secret
        assert url.split(".")[-1] not in dumped
    monkeypatch.setenv("SIZEWISE_DATABASE_URL", database_url)
    assert cli.main(["audit", "verify"]) == 0, capsys.readouterr().err


def test_an_intake_token_revokes_only_the_links_of_its_own_requests(api):
    mine = api.submit(role="intake", name="a.okafor").get_json()["id"]
    theirs = api.submit(role="intake", name="someone else").get_json()["id"]
    assert (
        api.post(
            f"/v1/requests/{mine}/report-links/revoke", role="intake", name="a.okafor"
        ).status_code
        == 200
    )
    r = api.post(f"/v1/requests/{theirs}/report-links/revoke", role="intake", name="a.okafor")
    assert r.status_code == 404
    assert api.post(f"/v1/requests/{'0' * 32}/report-links/revoke").status_code == 404


# --- security headers ------------------------------------------------------------------------


def test_the_report_page_carries_csp_nosniff_and_no_referrer(api, client):
    request_id = _computed(api)
    page = client.get(f"/v1/requests/{request_id}/report")
    assert page.status_code == 200 and page.mimetype == "text/html"
    assert page.headers["X-Content-Type-Options"] == "nosniff"
    assert page.headers["Referrer-Policy"] == "no-referrer"
    policy = page.headers["Content-Security-Policy"]
    assert "default-src 'none'" in policy and "frame-ancestors 'none'" in policy
    # The page's own inline script (copy the justification) is allowed by its hash, no other.
    scripts = re.findall(r"<script>(.*?)</script>", page.get_data(as_text=True), re.DOTALL)
    assert scripts, "the report has its copy-button script"
    for body in scripts:
        digest = base64.b64encode(hashlib.sha256(body.encode()).digest()).decode()
        assert f"'sha256-{digest}'" in policy
    assert "'unsafe-inline'" not in policy.split("script-src", 1)[1]

    for path in (f"/v1/requests/{request_id}/curve.svg", "/v1/staff/requests"):
        r = client.get(path)
        assert r.status_code == 200 and "default-src 'none'" in r.headers["Content-Security-Policy"]
    for r in (client.get(f"/v1/requests/{request_id}"), client.get("/v1/requests/nope")):
        assert r.headers["X-Content-Type-Options"] == "nosniff"
        assert r.headers["Referrer-Policy"] == "no-referrer"


# --- owner-only files ------------------------------------------------------------------------


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def test_the_sqlite_database_and_its_wal_files_are_owner_only(tmp_path: Path):
    old = os.umask(0o022)  # the usual umask, which would give 0644
    try:
        db = tmp_path / "sizewise.db"
        engine = make_engine(f"sqlite:///{db}")
        with engine.begin() as conn:
            conn.execute(text("CREATE TABLE t (x INTEGER)"))
            conn.execute(text("INSERT INTO t VALUES (1)"))
            # While a connection is open, WAL mode keeps its -wal and -shm files beside the db.
            assert Path(f"{db}-wal").exists() and Path(f"{db}-shm").exists()
            for path in (db, Path(f"{db}-wal"), Path(f"{db}-shm")):
                assert _mode(path) == 0o600, path
        engine.dispose()
        # A database left world-readable by an earlier version is tightened when opened.
        os.chmod(db, 0o644)
        make_engine(f"sqlite:///{db}").dispose()
        assert _mode(db) == 0o600
    finally:
        os.umask(old)


def test_the_link_key_and_the_launcher_logs_are_owner_only(tmp_path: Path, monkeypatch):
    old = os.umask(0o022)
    try:
        monkeypatch.setenv("SIZEWISE_VAR_DIR", str(tmp_path / "var"))
        link_key({})
        assert _mode(tmp_path / "var" / "secret_key") == 0o600
        sup = Supervisor()
        env = dict(os.environ, SIZEWISE_VAR_DIR=str(tmp_path / "var"))
        sup.start("probe", [sys.executable, "-c", "print('probe ran')"], env)
        sup.children["probe"].wait(30)
        log = tmp_path / "var" / "logs" / "probe.log"
        assert "probe ran" in log.read_text() and _mode(log) == 0o600
        assert _mode(log.parent) == 0o700
        # An older, world-readable log is tightened when it is opened again.
        os.chmod(log, 0o644)
        with open_private_log(log):
            pass
        assert _mode(log) == 0o600
    finally:
        os.umask(old)


# --- secrets out of the access log -----------------------------------------------------------


@pytest.mark.parametrize(
    "raw,secret",
    [
        ("GET /v1/requests/abc/report?link=abc.123.deadbeef HTTP/1.1", "deadbeef"),
        ("/v1/requests/abc/curve.svg?x=1&link=abc.123.cafe", "cafe"),
        ("link=abc.123.f00d", "f00d"),
        ("/report?%6Cink=abc.123.beef", "beef"),  # a percent-encoded name is the same parameter
        ("/report?LINK=abc.123.feed", "feed"),
    ],
)
def test_report_link_values_are_redacted_wherever_they_appear(raw, secret):
    redacted = redact_query(raw)
    assert secret not in redacted and REDACTED in redacted


def test_the_access_logger_redacts_links_referrers_and_credentials():
    """gunicorn's own atom building, with the headers and environment a request brings."""
    logger = RedactingAccessLogger(Config())
    signature = "9" * 64
    uri = f"/v1/requests/{'a' * 32}/report?link={'a' * 32}.1900000000.{signature}"
    environ = {
        "REQUEST_METHOD": "GET",
        "RAW_URI": uri,
        "PATH_INFO": uri.split("?")[0],
        "QUERY_STRING": uri.split("?")[1],
        "SERVER_PROTOCOL": "HTTP/1.1",
        "REMOTE_ADDR": "127.0.0.1",
        "HTTP_REFERER": f"https://intranet.example{uri}",
        "HTTP_AUTHORIZATION": "Bearer sw_secretsecret",
    }

    class Response:  # gunicorn's response as the logger reads it: status, headers, bytes sent
        status = "200 OK"
        headers = [("Content-Type", "text/html")]
        sent = 10

    request_headers = [
        ("Authorization", "Bearer sw_secretsecret"),
        ("Referer", environ["HTTP_REFERER"]),
    ]
    atoms = logger.atoms(Response(), request_headers, environ, timedelta(milliseconds=3))
    flat = json.dumps(atoms, default=str)
    assert signature not in flat and "sw_secretsecret" not in flat
    assert atoms["r"] == f"GET {uri.split('link=')[0]}link={REDACTED} HTTP/1.1"
    assert atoms["{authorization}i"] == REDACTED


def test_the_development_servers_request_log_is_redacted(app, caplog):
    """werkzeug's request logger (``flask run``) gets the same redaction once the app exists."""
    import logging

    signature = "7" * 64
    with caplog.at_level(logging.INFO, logger="werkzeug"):
        logging.getLogger("werkzeug").info(
            '%s - - [%s] "%s" %s %s',
            "127.0.0.1",
            "02/Dec/2026 03:00:00",
            f"GET /v1/requests/{'a' * 32}/report?link={'a' * 32}.1900000000.{signature} HTTP/1.1",
            "200",
            "-",
        )
    assert caplog.records and signature not in caplog.text and "link=[redacted]" in caplog.text


# --- failures in words -----------------------------------------------------------------------


@pytest.mark.parametrize(
    "exc,words",
    [
        (OverflowError("math range error"), "overflow double precision"),
        (ZeroDivisionError("float division by zero"), "divides by came out as zero"),
        (MemoryError(), "more memory"),
        (FloatingPointError("overflow encountered"), "numeric step failed"),
        (ValueError("math domain error"), "could not handle these inputs"),
        (KeyError("x"), "did not foresee"),
    ],
)
def test_describe_failure_says_it_in_words(exc, words):
    message = describe_failure(exc)
    assert words in message and not EXCEPTION_NAME.search(message)
    assert str(exc) not in message or not str(exc)


def test_a_question_that_fails_in_the_worker_is_shown_in_words(api, client):
    """The real task function, on a stored question whose numbers overflow double precision."""
    request_id = api.submit().get_json()["id"]
    with session_scope(api.sessions()) as session:
        # Arranged behind the API (which may refuse such numbers at submission): the worker
        # must still say what went wrong in words.
        row = session.get(Request, request_id)
        question = dict(row.question)
        question["effect"] = {**question["effect"], "difference": 1e308}
        question["assumptions"] = {**question["assumptions"], "sd": 1e-300}
        row.question = question
    outcome = run_request_job(request_id, api.app.extensions["sizewise"]["config"])
    assert outcome == "failed"
    detail = client.get(f"/v1/requests/{request_id}").get_json()
    assert detail["status"] == "failed"
    assert detail["error"] and not EXCEPTION_NAME.search(detail["error"]), detail["error"]
    failed = [e for e in detail["history"] if e["action"] == "failed"]
    assert failed and not EXCEPTION_NAME.search(json.dumps(failed))
