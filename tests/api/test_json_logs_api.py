"""The API's application log: JSON lines carrying the X-Request-Id it returns, and no secrets."""

from __future__ import annotations

import io
import json
import logging

import pytest

from service import jsonlog
from workers.tasks import run_request_job


@pytest.fixture
def log_lines():
    """Capture the root logger's output as the served API writes it (service.jsonlog)."""
    stream = io.StringIO()
    root = logging.getLogger()
    level = root.level
    handler = jsonlog.configure(logging.INFO, stream=stream)
    yield lambda: [json.loads(line) for line in stream.getvalue().splitlines()]
    root.removeHandler(handler)
    root.setLevel(level)


def test_the_request_line_carries_the_returned_request_id(client, log_lines):
    reply = client.get("/v1/catalogue", headers={"X-Request-Id": "ngh-cro.trace-0007"})
    assert reply.headers["X-Request-Id"] == "ngh-cro.trace-0007"
    lines = [line for line in log_lines() if line["logger"] == "service.api.requests"]
    assert len(lines) == 1, lines
    line = lines[0]
    assert line["request_id"] == "ngh-cro.trace-0007"
    assert line["message"].startswith("GET /v1/catalogue 200 ")
    assert line["level"] == "INFO" and line["time"].endswith("+00:00")
    # A generated id is the one returned and the one logged.
    reply = client.get("/v1/catalogue")
    assert log_lines()[-1]["request_id"] == reply.headers["X-Request-Id"]


def test_a_report_links_secret_never_reaches_the_log(api, app, anon_client, log_lines):
    request_id = api.submit().get_json()["id"]
    assert run_request_job(request_id, app.extensions["sizewise"]["config"]) == "computed"
    url = api.post(f"/v1/requests/{request_id}/report-links", role="auditor").get_json()["url"]
    secret = url.split("link=", 1)[1]
    reply = anon_client.get(url, headers={"X-Request-Id": "report-open-1"})
    assert reply.status_code == 200
    text = json.dumps(log_lines())
    assert secret not in text
    # The line names the route pattern, never the path with its query.
    opened = [line for line in log_lines() if line.get("request_id") == "report-open-1"]
    assert [line["message"].split()[:3] for line in opened] == [
        ["GET", "/v1/requests/<request_id>/report", "200"]
    ]


def test_a_json_line_stays_one_line_and_keeps_the_exception():
    stream = io.StringIO()
    logger = logging.getLogger("tests.jsonlog.one_line")
    handler = jsonlog.JsonHandler(stream)
    handler.setFormatter(jsonlog.JsonFormatter())
    logger.addHandler(handler)
    logger.propagate = False
    try:
        with jsonlog.context(request_id="r-1", job_kind="request", job_id="abc"):
            try:
                raise ValueError("bad\nvalue")
            except ValueError:
                logger.exception("two\nlines")
        logger.warning("outside")
    finally:
        logger.removeHandler(handler)
        logger.propagate = True
    first, second = (json.loads(line) for line in stream.getvalue().splitlines())
    assert first["message"] == "two\nlines" and "ValueError: bad" in first["exception"]
    assert (first["request_id"], first["job_kind"], first["job_id"]) == ("r-1", "request", "abc")
    assert "request_id" not in second  # the context ended with the block
