"""The repeated-measures example through the API, the CLI and the report."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

from service.engine import verify
from service.reports.justification import justification
from service.reports.render import render_report
from tests.reports.reports_testkit import REQUEST

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "service" / "examples" / "northbridge_asthma_visits.json"


def test_example_through_api_cli_and_report(client):
    raw = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    r = client.post("/v1/calculations", json={"question": raw})
    assert r.status_code == 200, r.get_json()
    record = r.get_json()
    assert record["method"]["analysis"] == "mean_over_visits"

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(EXAMPLE)], capture_output=True, text=True, cwd=ROOT, timeout=300
    )
    assert out.returncode == 0, out.stderr
    cli_record = json.loads(out.stdout)
    assert verify(cli_record)
    assert cli_record["sample_size"] == record["sample_size"]

    text = justification(record)
    assert "Continuous outcome, two groups with repeated measures" in text
    assert "4 visits" in text and "AR(1)" in text
    page = render_report(REQUEST, record, curve_svg="<svg></svg>")
    assert "repeated measures" in page
    assert str(record["sample_size"]["total"]) in page
