"""`sizewise report` writes the same page the service serves, from a record file or a stored id."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import xml.etree.ElementTree as ET

from reports_testkit import posted

from service.engine import compute
from service.schemas.question import load_question
from service.store import jobs
from service.store import requests as store
from service.store.db import make_engine, make_sessionmaker, session_scope
from service.store.migrate import upgrade

QUESTION = posted()


def _sizewise(*args: str, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "service.cli", *args],
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, **(env or {})},
    )


def test_report_from_a_record_file(tmp_path, analytic_record):
    path = tmp_path / "record.json"
    path.write_text(json.dumps(analytic_record))
    done = _sizewise("report", str(path), "--out", str(tmp_path / "out"))
    assert done.returncode == 0, done.stderr
    html_path = done.stdout.strip().splitlines()[-1]
    page = open(html_path, encoding="utf-8").read()
    assert str(analytic_record["sample_size"]["total"]) in page
    assert analytic_record["reproducibility"]["record_sha256"] in page
    svg = ET.parse(html_path[: -len(".html")] + ".svg").getroot()
    assert {"target-line", "chosen-n"} <= {el.get("id") for el in svg.iter()}


def test_report_from_a_stored_request(tmp_path):
    url = f"sqlite:///{tmp_path / 'reports.db'}"
    upgrade(url)
    engine = make_engine(url)
    factory = make_sessionmaker(engine)
    question = load_question(QUESTION)
    with session_scope(factory) as s:
        row = store.create_request(
            s,
            protocol={"id": "NGH-2026-044", "title": "Invented report check"},
            requester={
                "name": "Dr. Test",
                "email": "t@northbridge-general.example",
                "department": "Research office",
            },
            deadline=None,
            notes=None,
            question_raw=QUESTION,
            question=question,
            idempotency_key=None,
            body_sha256="0" * 64,
            actor="test",
        )
        request_id = row.id
        assert jobs.claim(s, "request", request_id, "w", 60, 3)
    record = compute(question)
    with session_scope(factory) as s:
        assert jobs.finish_request(s, request_id, "w", record) == "stored"
    engine.dispose()
    done = _sizewise(
        "report", request_id, "--out", str(tmp_path), env={"SIZEWISE_DATABASE_URL": url}
    )
    assert done.returncode == 0, done.stderr
    page = (tmp_path / f"sizewise-report-{request_id}.html").read_text(encoding="utf-8")
    # published 64 per group: Cohen 1988, Table 2.4.1
    assert "NGH-2026-044" in page and "64" in page


def test_report_refuses_an_unknown_source_clearly(tmp_path):
    url = f"sqlite:///{tmp_path / 'empty.db'}"
    upgrade(url)
    done = _sizewise("report", "no-such-thing", env={"SIZEWISE_DATABASE_URL": url})
    assert done.returncode == 2
    assert "no-such-thing" in done.stderr and "Traceback" not in done.stderr
