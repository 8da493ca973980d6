"""The audit bundle: exported by the API from a real computed request, verified by
``sizewise verify`` in a fresh process with no database, and every kind of tampering named.

The questions are the shipped examples, read by file name (service/examples/). Requests are
computed in-process by the worker's own task function. Demo data: Northbridge, invented.
"""

from __future__ import annotations

import copy
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import service.cli as cli
from service.bundle import FORMAT, LOCK_FILE
from service.bundle.check import FAILED, OK, exported_event_hash, verify_bundle
from service.engine.records import record_hash
from service.store.chain import content_hash
from workers.tasks import run_request_job, run_rerun_job

EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"
SIZEWISE = Path(sys.executable).with_name("sizewise")


def _example(name: str) -> dict:
    return json.loads((EXAMPLES / name).read_text())


def _computed(app, api, example: str) -> str:
    r = api.submit(api.request_body(_example(example)), role="statistician", name="r.patel")
    assert r.status_code == 202, r.get_json()
    request_id = r.get_json()["id"]
    assert run_request_job(request_id, app.extensions["sizewise"]["config"]) == "computed"
    return request_id


def _bundle(client, auth, request_id: str) -> dict:
    r = client.get(f"/v1/requests/{request_id}/bundle", headers=auth("auditor", "k.ito"))
    assert r.status_code == 200, r.get_json()
    assert r.headers["Content-Disposition"] == (
        f'attachment; filename="sizewise-bundle-{request_id}.json"'
    )
    return r.get_json()


@pytest.fixture
def bundle(app, api, client, auth) -> dict:
    """The bundle of a reviewed analytic request whose events interleave with another request's."""
    first = api.submit(api.request_body(_example("northbridge_bp_trial.json"))).get_json()["id"]
    other = _computed(app, api, "northbridge_wound_infection.json")
    assert run_request_job(first, app.extensions["sizewise"]["config"]) == "computed"
    assert other != first
    for path, body in (
        ("comments", {"text": "SD from the 2024 clinic audit?"}),
        ("assign", {"to": "j.moreau"}),
        ("approve", {"note": "Assumptions match the protocol."}),
    ):
        r = api.post(f"/v1/requests/{first}/{path}", body)
        assert r.status_code in (200, 201), r.get_json()
    r = api.post(f"/v1/requests/{first}/reruns", role="auditor", name="k.ito")
    assert r.status_code == 202, r.get_json()
    assert run_rerun_job(r.get_json()["id"], app.extensions["sizewise"]["config"]) == "done"
    return _bundle(client, auth, first)


def _verify_file(path: Path, tmp_path: Path) -> subprocess.CompletedProcess:
    """``sizewise verify`` in a fresh process: no SIZEWISE_ setting but an empty var folder."""
    var = tmp_path / "empty-var"
    var.mkdir(exist_ok=True)
    env = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    env["SIZEWISE_VAR_DIR"] = str(var)
    done = subprocess.run(
        [str(SIZEWISE), "verify", str(path)],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    # No database was opened: SQLite would have created its file under the var folder.
    assert list(var.iterdir()) == [], list(var.iterdir())
    return done


def test_the_bundle_holds_what_an_auditor_needs(bundle):
    assert (bundle["format"], bundle["format_version"]) == (FORMAT, 1)
    record = bundle["record"]
    assert bundle["record_sha256"] == record["reproducibility"]["record_sha256"]
    assert bundle["record_sha256"] == record_hash(record)
    assert bundle["submission"]["question_raw"] == _example("northbridge_bp_trial.json")
    assert bundle["submission"]["protocol"]["id"] and bundle["submission"]["requester"]["email"]
    submitted = bundle["audit"]["events"][0]
    assert content_hash(bundle["question"]) == submitted["detail"]["question_sha256"]
    assert content_hash(bundle["submission"]) == submitted["detail"]["submission_sha256"]
    assert bundle["seed"] is None and bundle["seed_scheme"]["scheme"] is None
    env = bundle["environment"]
    assert env["computed_with"] == record["reproducibility"]["versions"]
    assert {"numpy", "scipy", "sizewise", "python"} <= set(env["exported_with"])
    assert env["lock_file"] == LOCK_FILE
    events = bundle["audit"]["events"]
    actions = [e["action"] for e in events]
    assert actions[0] == "submitted"
    assert {"computed", "comment", "assigned", "approved", "rerun_done"} <= set(actions), actions
    for event in events:
        assert event["sha256"] == exported_event_hash(event)
    chain = bundle["audit"]["chain"]
    # The other request's events sit between this one's: present as links only.
    assert len(chain) > len(events)
    assert all(set(link) == {"id", "prev_sha256", "sha256"} for link in chain)
    assert bundle["audit"]["head"]["event"] >= chain[-1]["id"]


def test_a_real_bundle_verifies_identical_in_a_fresh_process_without_a_database(bundle, tmp_path):
    path = tmp_path / "bundle.json"
    path.write_text(json.dumps(bundle))
    done = _verify_file(path, tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "identical: the recomputed record matches" in done.stdout
    assert FAILED not in done.stdout
    versions = bundle["record"]["reproducibility"]["versions"]
    assert f"computed with: numpy {versions['numpy']}" in done.stdout
    assert "verified with: numpy " in done.stdout and "python " in done.stdout


def test_a_simulated_request_verifies_identical_with_its_seed(app, api, client, auth, tmp_path):
    request_id = _computed(app, api, "northbridge_bp_trial_simulated.json")
    bundle = _bundle(client, auth, request_id)
    assert bundle["seed"] == bundle["record"]["reproducibility"]["seed"] is not None
    assert bundle["seed_scheme"]["scheme"] and bundle["seed_scheme"]["bit_generator"]
    path = tmp_path / "simulated.json"
    path.write_text(json.dumps(bundle))
    done = _verify_file(path, tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "identical" in done.stdout


def _checks(bundle: dict) -> dict[str, str]:
    verdict = verify_bundle(bundle)
    return {c.name: c.outcome for c in verdict.checks} | {"identical": verdict.identical}


def test_the_untouched_bundle_passes_every_check(bundle):
    outcomes = _checks(bundle)
    assert outcomes.pop("identical") is True
    assert set(outcomes.values()) == {OK}, outcomes


def _cli(tmp_path: Path, bundle: dict, capsys) -> tuple[int, str, str]:
    path = tmp_path / "tampered.json"
    path.write_text(json.dumps(bundle))
    code = cli.main(["verify", str(path)])
    out, err = capsys.readouterr()
    return code, out, err


def test_a_changed_record_fails_its_hash_and_its_recomputation(bundle, tmp_path, capsys):
    tampered = copy.deepcopy(bundle)
    tampered["record"]["power"]["estimate"] += 0.01
    code, out, err = _cli(tmp_path, tampered, capsys)
    assert code == 1
    assert "FAILED      record hash: the record's content hashes to" in out
    assert "DIFFERS" in out and "  power.estimate" in out
    assert "verification failed: record hash" in err


def test_a_resealed_record_is_caught_by_the_computed_event(bundle):
    tampered = copy.deepcopy(bundle)
    tampered["record"]["power"]["estimate"] += 0.01
    sha = record_hash(tampered["record"])
    tampered["record"]["reproducibility"]["record_sha256"] = tampered["record_sha256"] = sha
    outcomes = _checks(tampered)
    assert outcomes["record hash"] == OK
    assert outcomes["result event"] == FAILED and outcomes["identical"] is False


def test_a_changed_question_is_named(bundle, tmp_path, capsys):
    tampered = copy.deepcopy(bundle)
    tampered["question"]["alpha"] = 0.01
    code, out, _err = _cli(tmp_path, tampered, capsys)
    assert code == 1
    assert "FAILED      question: the question hashes to" in out
    assert "recorded" in out and "the question was changed" in out


def test_a_changed_event_is_named(bundle, tmp_path, capsys):
    tampered = copy.deepcopy(bundle)
    event = tampered["audit"]["events"][0]
    event["actor"] = "someone else (statistician)"
    code, out, err = _cli(tmp_path, tampered, capsys)
    assert code == 1
    assert f"FAILED      audit events: event {event['id']} (submitted): its content hashes" in out
    assert "audit events" in err


def test_a_broken_chain_link_is_named(bundle, tmp_path, capsys):
    tampered = copy.deepcopy(bundle)
    events = tampered["audit"]["events"]
    # Reseal the request's last event on another predecessor: its own hash then holds, the link
    # to the event before it does not.
    event = events[-1]
    event["prev_sha256"] = "0" * 64
    event["sha256"] = exported_event_hash(event)
    link = next(x for x in tampered["audit"]["chain"] if x["id"] == event["id"])
    link.update(prev_sha256=event["prev_sha256"], sha256=event["sha256"])
    code, out, _err = _cli(tmp_path, tampered, capsys)
    assert code == 1
    assert _checks(tampered)["audit events"] == OK
    assert "FAILED      chain links: link broken between event" in out
    assert f"and event {event['id']}: event {event['id']}'s prev_sha256 000000000000" in out


def test_an_altered_link_between_the_requests_events_is_named(bundle):
    tampered = copy.deepcopy(bundle)
    own = {e["id"] for e in tampered["audit"]["events"]}
    foreign = next(x for x in tampered["audit"]["chain"] if x["id"] not in own)
    foreign["sha256"] = "f" * 64
    verdict = verify_bundle(tampered)
    chain = next(c for c in verdict.checks if c.name == "chain links")
    assert (
        chain.outcome == FAILED and f"event {foreign['id']}'s sha256 ffffffffffff" in chain.detail
    )


def test_a_file_that_is_not_a_bundle_is_refused_naming_the_field(tmp_path, capsys, bundle):
    broken = copy.deepcopy(bundle)
    del broken["audit"]["events"][0]["sha256"]
    code, _out, err = _cli(tmp_path, broken, capsys)
    assert code == 2
    assert "audit.events.0.sha256: must be a string; got missing" in err
    code, _out, err = _cli(tmp_path, {"design": "anything"}, capsys)
    assert code == 2 and "format: must be 'sizewise-audit-bundle'" in err


def test_no_bundle_before_the_result(api, client, auth):
    request_id = api.submit().get_json()["id"]
    r = client.get(f"/v1/requests/{request_id}/bundle", headers=auth("statistician", "j.moreau"))
    assert r.status_code == 409
    assert "no stored result yet" in r.get_json()["detail"]


def test_verify_has_its_own_help():
    done = subprocess.run(
        [str(SIZEWISE), "verify", "--help"], capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 0
    assert "BUNDLE" in done.stdout and "with no server and no database" in done.stdout
    assert "Exit status: 0 identical" in done.stdout and "lock file" in done.stdout
