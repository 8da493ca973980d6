"""The many-arms and repeated-measures examples through the API, the CLI and the report."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from service.engine import verify
from service.reports.justification import justification
from service.reports.render import render_report
from tests.reports.reports_testkit import REQUEST

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "service" / "examples"

# example file, (method key, expected value), phrases in the justification, a phrase in the page
CASES = [
    (
        "northbridge_asthma_visits.json",
        ("analysis", "mean_over_visits"),
        ("Continuous outcome, two groups with repeated measures", "4 visits", "AR(1)"),
        "repeated measures",
    ),
    (
        "northbridge_analgesia_three_doses.json",
        ("analysis_label", "Dunnett's many-to-one test"),
        (
            "Continuous outcome, treatments against a shared control",
            "3 treatment groups",
            "at least one treatment group significant",
        ),
        "Dunnett",
    ),
    (
        "northbridge_wound_dressings_three_arm.json",
        ("analysis_label", "Dunnett-type many-to-one test on pooled z statistics"),
        (
            "Binary outcome, treatments against a shared control",
            "3 treatment groups",
            "an event proportion of 0.1 in each treatment group",
        ),
        "Dunnett",
    ),
    (
        "northbridge_smoking_cessation_rate.json",
        ("analysis", "exact_binomial"),
        (
            "Binary outcome, single group",
            "a reference rate of 0.2",
            "from n = 59 on",
        ),
        "exact binomial test",
    ),
    (
        "northbridge_phase2_two_stage.json",
        ("analysis", "simon_two_stage"),
        (
            "Binary outcome, two-stage single-arm study (Simon)",
            "r1/n1 = 3/13, r/n = 12/43",
            "the minimax design is 4/18, 10/33",
        ),
        "Simon",
    ),
    (
        "northbridge_antiemetic_paired.json",
        ("analysis", "mcnemar"),
        (
            "Binary outcome, paired (matched pairs)",
            "0.15 of pairs with the event under treatment only",
            "206 pairs",
        ),
        "McNemar",
    ),
]


@pytest.mark.parametrize(("name", "method", "phrases", "on_page"), CASES)
def test_example_through_api_cli_and_report(client, name, method, phrases, on_page):
    example = EXAMPLES / name
    raw = json.loads(example.read_text(encoding="utf-8"))
    r = client.post("/v1/calculations", json={"question": raw})
    assert r.status_code == 200, r.get_json()
    record = r.get_json()
    assert record["method"][method[0]] == method[1]

    sizewise = ROOT / ".venv" / "bin" / "sizewise"
    cmd = [str(sizewise)] if sizewise.exists() else [sys.executable, "-m", "service.cli"]
    out = subprocess.run(
        [*cmd, "compute", str(example)], capture_output=True, text=True, cwd=ROOT, timeout=300
    )
    assert out.returncode == 0, out.stderr
    cli_record = json.loads(out.stdout)
    assert verify(cli_record)
    assert cli_record["sample_size"] == record["sample_size"]

    text = justification(record)
    for phrase in phrases:
        assert phrase in text
    page = render_report(REQUEST, record, curve_svg="<svg></svg>")
    assert on_page in page
    assert str(record["sample_size"]["total"]) in page
