"""`sizewise audit verify` names every tampering with what the audit trail recorded.

Each test builds a real history through the API and the worker's own task functions (submitted,
computed, commented, approved, a rerun, an exploration, tokens issued and revoked), checks that
verify calls it intact, then edits the database behind the service's back, the way someone with
write access to it could, and checks that verify exits 1 naming what changed. Runs on SQLite
and on PostgreSQL. Demo data: Northbridge General Hospital research office, invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from sqlalchemy import text

import service.cli as cli
from service.engine.records import seal
from workers.exploration_tasks import run_exploration_job
from workers.tasks import run_request_job, run_rerun_job


def _config(api) -> dict:
    return api.app.extensions["sizewise"]["config"]


def _json_param(conn) -> str:
    return "CAST(:v AS JSON)" if conn.dialect.name == "postgresql" else ":v"


def _load(value):
    return value if isinstance(value, (dict, list)) else json.loads(value)


@pytest.fixture
def history(api, tokens) -> dict:
    """Two computed requests (one approved, one with a rerun and an exploration), tokens, a revoke."""
    config = _config(api)
    first = api.submit().get_json()["id"]
    second = api.submit().get_json()["id"]
    for request_id in (first, second):
        assert run_request_job(request_id, config) == "computed"
    api.post(f"/v1/requests/{first}/comments", {"text": "SD from the pilot study."})
    r = api.post(f"/v1/requests/{first}/approve", {"note": "Assumptions checked."})
    assert r.status_code == 200, r.get_json()
    rerun = api.post(f"/v1/requests/{second}/reruns", {"note": "Annual check."}, role="auditor")
    assert rerun.status_code == 202, rerun.get_json()
    assert run_rerun_job(rerun.get_json()["id"], config) == "done"
    exploration = api.post(
        f"/v1/requests/{second}/explorations",
        {"type": "sensitivity_grid", "grid": {"adjustments.dropout": [0.0, 0.2]}},
    )
    assert exploration.status_code == 202, exploration.get_json()
    assert run_exploration_job(exploration.get_json()["id"], config) == "done"
    revoked = tokens.token_id("intake", "temp clerk")
    r = api.client.post(f"/v1/tokens/{revoked}/revoke", headers=tokens.headers("admin", "it desk"))
    assert r.status_code == 200
    return {
        "approved": first,
        "computed": second,
        "statistician": tokens.token_id("statistician", "j.moreau"),
        "revoked": revoked,
    }


def _verify(monkeypatch, capsys, database_url: str, *extra: str) -> tuple[int, str, str]:
    monkeypatch.setenv("SIZEWISE_DATABASE_URL", database_url)
    code = cli.main(["audit", "verify", *extra])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _engine(api):
    return api.app.extensions["sizewise"]["engine"]


def test_an_untouched_history_with_reruns_and_explorations_is_intact(
    api, history, database_url, monkeypatch, capsys
):
    code, out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 0, err
    assert err == "" and "not covered" not in out
    assert "audit trail intact:" in out
    assert "2 requests, 2 results, 1 reruns, 1 explorations" in out
    with _engine(api).connect() as conn:
        head_id, head_sha = conn.execute(
            text("SELECT id, sha256 FROM audit_events ORDER BY id DESC LIMIT 1")
        ).one()
    assert f"anchor: event {head_id} sha256 {head_sha}" in out


def test_a_rewritten_and_resealed_result_is_caught(api, history, database_url, monkeypatch, capsys):
    request_id = history["approved"]
    with _engine(api).begin() as conn:
        stored = conn.execute(
            text("SELECT record FROM results WHERE request_id = :r"), {"r": request_id}
        ).scalar()
        record = _load(stored)
        record["sample_size"]["per_group"] = [50, 50]  # a smaller, cheaper study than computed
        record = seal(record)  # a fresh, self-consistent hash, as a careful forger would
        conn.execute(
            text(
                f"UPDATE results SET record = {_json_param(conn)}, record_sha256 = :h "
                "WHERE request_id = :r"
            ),
            {
                "v": json.dumps(record),
                "h": record["reproducibility"]["record_sha256"],
                "r": request_id,
            },
        )
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1
    assert f"result of request {request_id}: record hash differs from the 'computed' event" in err


def test_a_deleted_result_row_is_caught(api, history, database_url, monkeypatch, capsys):
    request_id = history["computed"]
    with _engine(api).begin() as conn:
        conn.execute(text("DELETE FROM results WHERE request_id = :r"), {"r": request_id})
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1
    assert f"result of request {request_id} is missing: the 'computed' event" in err


def test_deleting_the_last_five_events_is_caught_by_the_anchor(
    api, history, database_url, monkeypatch, capsys, tmp_path: Path
):
    anchor = tmp_path / "auditor" / "sizewise-anchor.jsonl"
    code, out, err = _verify(monkeypatch, capsys, database_url, "--anchor", str(anchor))
    assert code == 0, err
    line = json.loads(anchor.read_text().splitlines()[-1])
    assert f"anchor: event {line['event']} sha256 {line['sha256']}" in out
    assert anchor.stat().st_mode & 0o777 == 0o600
    # A second run finds the first anchor still in the chain and appends the new head.
    assert _verify(monkeypatch, capsys, database_url, "--anchor", str(anchor))[0] == 0
    assert len(anchor.read_text().splitlines()) == 2

    with _engine(api).begin() as conn:
        ids = conn.execute(text("SELECT id FROM audit_events ORDER BY id DESC LIMIT 5")).scalars()
        for event_id in list(ids):
            conn.execute(text("DELETE FROM audit_events WHERE id = :i"), {"i": event_id})
    # The shorter chain is still a consistent chain: the anchor is what says events went.
    code, out, err = _verify(monkeypatch, capsys, database_url, "--anchor", str(anchor))
    assert code == 1
    assert f"chain ends at event {line['event'] - 5} but the anchor" in err
    assert f"says {line['event']}: the newest events were deleted" in err
    assert len(anchor.read_text().splitlines()) == 2  # a failed check writes no new anchor


def test_a_rewritten_chain_no_longer_matches_the_anchor(
    api, history, database_url, monkeypatch, capsys, tmp_path: Path
):
    anchor = tmp_path / "anchor.jsonl"
    assert _verify(monkeypatch, capsys, database_url, "--anchor", str(anchor))[0] == 0
    head = json.loads(anchor.read_text())["event"]
    with _engine(api).begin() as conn:
        conn.execute(
            text("UPDATE audit_events SET sha256 = :h WHERE id = :i"), {"h": "0" * 64, "i": head}
        )
    code, _out, err = _verify(monkeypatch, capsys, database_url, "--anchor", str(anchor))
    assert code == 1
    assert f"event {head} no longer has the hash the anchor" in err


def test_a_changed_stored_question_is_caught(api, history, database_url, monkeypatch, capsys):
    request_id = history["computed"]
    with _engine(api).begin() as conn:
        question = _load(
            conn.execute(
                text("SELECT question FROM requests WHERE id = :r"), {"r": request_id}
            ).scalar()
        )
        question["effect"]["difference"] = 0.8  # reruns would now recompute a larger effect
        conn.execute(
            text(f"UPDATE requests SET question = {_json_param(conn)} WHERE id = :r"),
            {"v": json.dumps(question), "r": request_id},
        )
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1
    assert f"question of request {request_id}: the stored question differs" in err


def test_a_status_set_to_approved_without_an_event_is_caught(
    api, history, database_url, monkeypatch, capsys
):
    request_id = history["computed"]
    with _engine(api).begin() as conn:
        conn.execute(
            text("UPDATE requests SET status = 'approved' WHERE id = :r"), {"r": request_id}
        )
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1
    assert f"status of request {request_id} is 'approved' but its last status event" in err
    assert "says 'computed'" in err


def test_a_token_role_changed_to_admin_is_caught(api, history, database_url, monkeypatch, capsys):
    token_id = history["statistician"]
    with _engine(api).begin() as conn:
        conn.execute(text("UPDATE api_tokens SET role = 'admin' WHERE id = :t"), {"t": token_id})
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1
    assert f"token {token_id} has role 'admin' but its 'token_created' event" in err
    assert "issued it as 'statistician'" in err


def test_a_revoked_token_made_active_again_is_caught(
    api, history, database_url, monkeypatch, capsys
):
    token_id = history["revoked"]
    with _engine(api).begin() as conn:
        conn.execute(text("UPDATE api_tokens SET revoked_at = NULL WHERE id = :t"), {"t": token_id})
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1 and f"token {token_id} is active again although event" in err


def test_a_token_inserted_behind_the_service_is_caught(
    api, history, database_url, monkeypatch, capsys
):
    with _engine(api).begin() as conn:
        conn.execute(
            text(
                "INSERT INTO api_tokens (id, secret_sha256, role, name, created_at) "
                "VALUES (:i, :s, 'admin', 'backdoor', :c)"
            ),
            {"i": "b" * 32, "s": "c" * 64, "c": "2025-01-01 00:00:00"},
        )
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1 and f"token {'b' * 32} (admin, 'backdoor') is active but no" in err


def test_an_altered_rerun_and_exploration_are_caught(
    api, history, database_url, monkeypatch, capsys
):
    with _engine(api).begin() as conn:
        rerun_id, record = conn.execute(text("SELECT id, record FROM reruns")).one()
        record = _load(record)
        record["sample_size"]["per_group"] = [10, 10]
        conn.execute(
            text(f"UPDATE reruns SET record = {_json_param(conn)}"), {"v": json.dumps(record)}
        )
        # The table keeps the first version's name (no migration just for naming).
        exploration_id, result = conn.execute(text("SELECT id, result FROM analyses")).one()
        result = _load(result)
        result["shape"] = [1, 1]
        conn.execute(
            text(f"UPDATE analyses SET result = {_json_param(conn)}"), {"v": json.dumps(result)}
        )
    code, _out, err = _verify(monkeypatch, capsys, database_url)
    assert code == 1
    assert f"rerun {rerun_id} of request {history['computed']}: its stored result differs" in err
    assert f"exploration {exploration_id} of request {history['computed']}: its stored" in err


def test_events_written_before_the_hashes_are_reported_not_covered(
    api, database_url, monkeypatch, capsys
):
    """A chain written by the first version (no hashes in its events) is named, not passed."""
    from sqlalchemy import delete

    from service.store.audit import append_event
    from service.store.db import session_scope
    from service.store.models import AuditEvent

    request_id = api.submit().get_json()["id"]
    with session_scope(api.sessions()) as session:
        # Rebuild the chain as the earlier code wrote it: the same actions without the hashes.
        session.execute(delete(AuditEvent))
        append_event(
            session,
            request_id=request_id,
            actor="a.okafor (intake)",
            action="submitted",
            detail={
                "outcome": "continuous",
                "layout": "two_groups",
                "method": "analytic",
                "seed": None,
            },
        )
        append_event(session, request_id=request_id, actor="system", action="published", detail={})
    code, out, err = _verify(monkeypatch, capsys, database_url)
    assert "not covered (recorded before the audit events held their hashes): 1 questions" in out
    assert f"1 statuses: {request_id}" in out
    # The intake token was issued by this version; with its event gone it is a finding.
    assert code == 1 and "is active but no 'token_created' event issued it" in err
