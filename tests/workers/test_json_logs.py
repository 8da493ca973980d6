"""A real worker's log: JSON lines repeating the X-Request-Id of the submission, job by job.

The embedded default (SQLite + folder broker) and a real ``celery worker`` process: a request is
submitted with a chosen X-Request-Id, the API returns it, logs it on its own line, and sends it
with the task (a message header); the worker's log then carries it on every line of that job.
"""

from __future__ import annotations

import io
import json
import logging

import pytest
from workers_testkit import PROTOCOL, REQUESTER, Stack

from service import create_app, jsonlog

pytestmark = pytest.mark.services

TRACE = "ngh-cro.trace-2041"


def _question() -> dict:
    """A small simulation (so a worker runs it; closed forms are answered at submission)."""
    return {
        "outcome": "ordinal",
        "layout": "two_groups",
        "find": "power",
        "sample_size": {"total": 60},
        "simulation": {
            "replicates": 400,
            "seed": 2041,
            "data": {
                "control": {"family": "lognormal", "mu": 1.0, "sigma": 0.8},
                "treatment": {"family": "lognormal", "mu": 1.4, "sigma": 0.8},
            },
        },
    }


def _json_lines(text: str) -> list[dict]:
    lines = []
    for raw in text.splitlines():
        try:
            parsed = json.loads(raw)
        except ValueError:
            continue  # Celery's start-up banner is printed, not logged
        if isinstance(parsed, dict):
            lines.append(parsed)
    return lines


def test_the_worker_repeats_the_request_id_on_every_line_of_the_job(embedded_config, start_worker):
    app = create_app(dict(embedded_config, TESTING=True))
    stream = io.StringIO()
    root = logging.getLogger()
    level = root.level
    handler = jsonlog.configure(logging.INFO, stream=stream)
    try:
        worker = start_worker(embedded_config, concurrency=1)
        stack = Stack(app)
        reply = stack.client.post(
            "/v1/requests",
            json={"protocol": PROTOCOL, "requester": REQUESTER, "question": _question()},
            headers={"X-Request-Id": TRACE},
        )
        assert reply.status_code == 202, reply.get_json()
        assert reply.headers["X-Request-Id"] == TRACE
        job_id = reply.get_json()["id"]
        body = stack.wait(job_id, timeout=90, worker=worker)
        assert body["status"] == "computed", (body["error"], worker.tail())
    finally:
        root.removeHandler(handler)
        root.setLevel(level)
        app.extensions["sizewise"]["engine"].dispose()

    # The API's line for the submission carries the id it returned.
    api_lines = [json.loads(line) for line in stream.getvalue().splitlines()]
    submitted = [
        line
        for line in api_lines
        if line["logger"] == "service.api.requests" and line["message"].startswith("POST ")
    ]
    assert [line.get("request_id") for line in submitted] == [TRACE], submitted

    text = worker.log_path.read_text()
    job_lines = [line for line in _json_lines(text) if line.get("job_id") == job_id]
    # The job's own lines: claimed and computed, each with the submission's request id.
    messages = [line["message"] for line in job_lines]
    assert any(m.endswith("computed") for m in messages), messages
    assert any("claimed" in m for m in messages), messages
    assert {line.get("request_id") for line in job_lines} == {TRACE}
    assert {line["job_kind"] for line in job_lines} == {"request"}
    # Every line of the log that names the job is such a JSON line (none in another format).
    naming = [raw for raw in text.splitlines() if job_id in raw]
    assert naming and all(json.loads(raw).get("request_id") == TRACE for raw in naming), naming
    for line in job_lines:
        assert set(line) >= {"time", "level", "logger", "message"}
