"""`sizewise tokens ...` and `sizewise audit verify` against the configured database."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from sqlalchemy import text

import service.cli as cli
from service import create_app
from service.engine import compute
from service.store import jobs
from service.store.db import session_scope
from service.store.migrate import upgrade
from service.store.models import Request

ROOT = Path(__file__).resolve().parents[2]
SIZEWISE = ROOT / ".venv" / "bin" / "sizewise"


def run(database_url: str, *args: str) -> subprocess.CompletedProcess:
    """Run the installed command with SIZEWISE_DATABASE_URL set (python -m as a fallback)."""
    cmd = [str(SIZEWISE)] if SIZEWISE.exists() else [sys.executable, "-m", "service.cli"]
    env = dict(os.environ, SIZEWISE_DATABASE_URL=database_url)
    return subprocess.run(
        [*cmd, *args], capture_output=True, text=True, cwd=ROOT, env=env, timeout=300
    )


@pytest.fixture
def sqlite_url(tmp_path: Path) -> str:
    url = f"sqlite:///{tmp_path / 'cli.db'}"
    upgrade(url)
    return url


def test_tokens_cli_creates_a_working_token_then_lists_and_revokes_it(sqlite_url, tmp_path):
    out = run(sqlite_url, "tokens", "create", "--role", "statistician", "--name", "r.patel")
    assert out.returncode == 0, out.stderr
    lines = out.stdout.strip().splitlines()
    secret = lines[-1]
    assert secret.startswith("sw_") and len(secret) == 46
    token_id = next(line.split(": ")[1] for line in lines if line.startswith("id: "))

    app = create_app({"DATABASE_URL": sqlite_url, "BROKER_URL": f"filesystem://{tmp_path / 'b'}"})
    client = app.test_client()
    headers = {"Authorization": f"Bearer {secret}"}
    assert client.get("/v1/requests", headers=headers).status_code == 200

    listed = run(sqlite_url, "tokens", "list")
    assert listed.returncode == 0 and token_id in listed.stdout and "r.patel" in listed.stdout
    assert secret not in listed.stdout and "active" in listed.stdout

    revoked = run(sqlite_url, "tokens", "revoke", token_id)
    assert revoked.returncode == 0 and token_id in revoked.stdout
    assert client.get("/v1/requests", headers=headers).status_code == 401
    assert "revoked" in run(sqlite_url, "tokens", "list").stdout
    app.extensions["sizewise"]["engine"].dispose()


@pytest.mark.parametrize(
    "args,needle",
    [
        (
            ("tokens", "create", "--role", "root"),
            "role: must be one of intake, statistician, auditor, admin; got 'root'",
        ),
        (("tokens", "create", "--role", "intake", "--name", " "), "name: must be 1-120"),
        (("tokens", "create"), "needs --role"),
        (("tokens", "revoke"), "needs the token ID"),
        (("tokens", "revoke", "0" * 32), "no token with id"),
        (("tokens", "list", "abc"), "takes no ID"),
    ],
)
def test_tokens_cli_bad_input_exits_2(sqlite_url, args, needle, capsys, monkeypatch):
    monkeypatch.setenv("SIZEWISE_DATABASE_URL", sqlite_url)
    code = cli.main(list(args))
    err = capsys.readouterr().err
    assert code == 2 and needle in err and "Traceback" not in err


def test_a_database_that_is_not_migrated_is_one_line_exit_1(tmp_path, capsys, monkeypatch):
    (tmp_path / "empty.db").touch()  # a file that exists (a missing one is named as missing)
    monkeypatch.setenv("SIZEWISE_DATABASE_URL", f"sqlite:///{tmp_path / 'empty.db'}")
    assert cli.main(["tokens", "list"]) == 1
    err = capsys.readouterr().err
    assert "is it migrated?" in err and "Traceback" not in err


def _computed_request(api) -> str:
    """Submit, then claim and store a real engine record as a worker would."""
    request_id = api.submit().get_json()["id"]
    with session_scope(api.sessions()) as s:
        assert jobs.claim(s, "request", request_id, "worker-test", 60, 3)
    with session_scope(api.sessions()) as s:
        record = compute(s.get(Request, request_id).question)
        assert jobs.finish_request(s, request_id, "worker-test", record)
    api.post(f"/v1/requests/{request_id}/comments", {"text": "SD from the pilot study."})
    return request_id


def _json_param(conn) -> str:
    # PostgreSQL's json column takes a cast text parameter; SQLite stores JSON as text.
    return "CAST(:v AS JSON)" if conn.dialect.name == "postgresql" else ":v"


def _verify(monkeypatch, capsys, database_url: str) -> tuple[int, str]:
    monkeypatch.setenv("SIZEWISE_DATABASE_URL", database_url)
    code = cli.main(["audit", "verify"])
    captured = capsys.readouterr()
    return code, captured.out + captured.err


def test_audit_verify_intact_then_catches_an_edited_result(api, database_url, monkeypatch, capsys):
    request_id = _computed_request(api)
    engine = api.app.extensions["sizewise"]["engine"]
    with engine.connect() as conn:
        events = conn.execute(text("SELECT COUNT(*) FROM audit_events")).scalar()
    out = run(database_url, "audit", "verify")
    assert out.returncode == 0, out.stderr
    with engine.connect() as conn:
        head_id, head_sha = conn.execute(
            text("SELECT id, sha256 FROM audit_events ORDER BY id DESC LIMIT 1")
        ).one()
    assert out.stdout.strip().splitlines() == [
        f"audit trail intact: {events} events, 1 requests, 1 results, 0 reruns, 0 explorations, "
        "2 tokens",
        f"anchor: event {head_id} sha256 {head_sha}",
    ]

    with engine.begin() as conn:
        stored = conn.execute(text("SELECT record FROM results")).scalar()
        record = stored if isinstance(stored, dict) else json.loads(stored)
        record["sample_size"]["per_group"] = [50, 50]  # a smaller, cheaper study than computed
        conn.execute(
            text(f"UPDATE results SET record = {_json_param(conn)}"), {"v": json.dumps(record)}
        )
    code, message = _verify(monkeypatch, capsys, database_url)
    assert code == 1 and f"result of request {request_id}: record hash differs" in message


def test_audit_verify_catches_an_edited_event(api, database_url, monkeypatch, capsys):
    _computed_request(api)
    engine = api.app.extensions["sizewise"]["engine"]
    with engine.begin() as conn:
        event_id = conn.execute(
            text("SELECT id FROM audit_events WHERE action = 'comment'")
        ).scalar()
        conn.execute(
            text(f"UPDATE audit_events SET detail = {_json_param(conn)} WHERE id = :id"),
            {"v": json.dumps({"text": "SD from a textbook."}), "id": event_id},
        )
    code, message = _verify(monkeypatch, capsys, database_url)
    assert code == 1 and f"audit trail broken at event {event_id} (comment" in message
