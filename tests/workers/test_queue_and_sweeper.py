"""Publishing (bounded, never hanging the API) and the sweeper's republishing of stale jobs."""

from __future__ import annotations

import base64
import json
from datetime import timedelta
from pathlib import Path

import pytest
from workers_testkit import insert_request, two_groups_question

from service import jsonlog
from service.config import load_config
from service.store import requests as store
from service.store.db import session_scope
from service.store.models import Request
from service.store.types import utcnow
from workers import queue, sweeper


def _messages(config: dict) -> list[tuple[str, list]]:
    """(task name, args) of the messages waiting in the filesystem broker's queue folder."""
    folder = Path(config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"])
    out = []
    for path in sorted(folder.glob("*.msg")):
        message = json.loads(path.read_text())
        assert message["content-type"] == "application/json"  # JSON only, never pickle
        args, _kwargs, _embed = json.loads(base64.b64decode(message["body"]))
        out.append((message["headers"]["task"], args))
    return out


def test_publish_writes_one_json_message_naming_the_task(sqlite_config):
    assert queue.publish("request", "abc123", sqlite_config) is True
    assert _messages(sqlite_config) == [("sizewise.run_request", ["abc123"])]


def test_publish_rejects_an_unknown_job_naming_the_value(sqlite_config):
    with pytest.raises(
        ValueError, match="job must be one of request, rerun, exploration; got 'report'"
    ):
        queue.publish("report", "abc123", sqlite_config)


def test_publish_to_a_dead_broker_returns_false_instead_of_raising():
    # Port 1 on localhost refuses connections: the retry policy gives up after two retries.
    config = load_config({"BROKER_URL": "redis://127.0.0.1:1/0"})
    assert queue.publish("request", "abc123", config) is False


def test_sweeper_publishes_an_unpublished_request_once_it_is_old_enough(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question(), status="received")
    # Just committed: the API may be publishing it this very moment, so it is left alone.
    assert sweeper.sweep_once(sqlite_config) == 0
    with session_scope(factory) as session:
        row = session.get(Request, request_id)
        row.submitted_at = utcnow() - timedelta(minutes=5)
    assert sweeper.sweep_once(sqlite_config) == 1
    with session_scope(factory) as session:
        row = session.get(Request, request_id)
        assert row.published_at is not None and row.status == "queued"
    assert _messages(sqlite_config) == [("sizewise.run_request", [request_id])]
    # Published now: a second sweep finds nothing to do.
    assert sweeper.sweep_once(sqlite_config) == 0


def test_sweeper_republishes_a_running_job_whose_lease_expired(sqlite_config, factory):
    request_id = insert_request(factory, two_groups_question())
    with session_scope(factory) as session:
        row = session.get(Request, request_id)
        row.published_at = utcnow() - timedelta(minutes=5)
        row.status = "running"
        row.lease_owner = "worker:gone:1:dead"
        row.lease_expires_at = utcnow() - timedelta(seconds=1)
    assert sweeper.sweep_once(sqlite_config) == 1
    assert _messages(sqlite_config) == [("sizewise.run_request", [request_id])]


def test_a_republished_message_carries_the_request_id_that_created_the_job(sqlite_config, factory):
    # The HTTP request id in force when the row is created is stored with the job ...
    question = two_groups_question()
    with jsonlog.context(request_id="ngh-intake.trace-0042"), session_scope(factory) as session:
        request_id = store.create_request(
            session,
            protocol={"id": "NGH-2026-044", "title": "Night-shift sleep study"},
            requester={"name": "Dr. Ana Quill", "email": "a.quill@northbridge.example"},
            deadline=None,
            notes=None,
            question_raw=question,
            question=question,
            actor="research-office",
            idempotency_key=None,
            body_sha256="0" * 64,
        ).id
    with session_scope(factory) as session:
        row = session.get(Request, request_id)
        assert row.trace_id == "ngh-intake.trace-0042"
        row.submitted_at = utcnow() - timedelta(minutes=5)
    # ... and the sweeper, running outside any HTTP request, sends it along again.
    assert jsonlog.current().get("request_id") is None
    assert sweeper.sweep_once(sqlite_config) == 1
    folder = Path(sqlite_config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"])
    (path,) = folder.glob("*.msg")
    headers = json.loads(path.read_text())["headers"]
    assert headers[queue.REQUEST_ID_HEADER] == "ngh-intake.trace-0042"


def test_sweeper_thread_starts_once_and_stops(sqlite_config):
    config = dict(sqlite_config, SWEEP_SECONDS=0.5)
    first = sweeper.start_thread(config)
    try:
        assert sweeper.start_thread(config) is first and first.is_alive()
    finally:
        sweeper.stop_thread()
    assert not first.is_alive()
