"""Smoke test of ``python -m service.run_local``: up, answers the README's request, reruns it
identically, and stops cleanly on SIGTERM to its process group."""

from __future__ import annotations

import json
import math
import os
import re
import signal
import subprocess
import sys
from pathlib import Path
from urllib.error import URLError
from urllib.request import Request, urlopen

import pytest

from service.run_local import local_environment

from ._procs import REPO, free_port, readme_example_request, start, stop_group, tail, wait_for

pytestmark = pytest.mark.slow

TERMINAL = {"computed", "failed", "cancelled"}
SIZEWISE = Path(sys.executable).with_name("sizewise")


class Api:
    """A tiny JSON client for the launcher's API."""

    def __init__(self, port: int, token: str | None = None) -> None:
        self.base = f"http://127.0.0.1:{port}"
        self.token = token

    def call(self, method: str, path: str, body: dict | None = None) -> tuple[int, dict]:
        """Send one request; return the status and the decoded JSON body."""
        data = None if body is None else json.dumps(body).encode()
        req = Request(self.base + path, data=data, method=method)
        if data is not None:
            req.add_header("Content-Type", "application/json")
        if self.token:
            req.add_header("Authorization", f"Bearer {self.token}")
        with urlopen(req, timeout=10) as resp:
            return resp.status, json.loads(resp.read() or b"null")

    def healthy(self) -> bool:
        """True when /healthz answers 200."""
        try:
            return self.call("GET", "/healthz")[0] == 200
        except (URLError, OSError):
            return False


def _banner_token(log: Path) -> str | None:
    """The statistician token the launcher printed at start, once its banner is out."""
    match = re.search(r"demo statistician token \([^)]*\): (\S+)", log.read_text())
    return match.group(1) if match else None


def _cli_token(env: dict[str, str], role: str) -> str:
    """Issue a token with `sizewise tokens create` on the launcher's database; its last line."""
    done = subprocess.run(
        [str(SIZEWISE), "tokens", "create", "--role", role, "--name", f"ops smoke {role}"],
        cwd=REPO,
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 0, done.stderr
    return done.stdout.strip().splitlines()[-1]


def test_local_launcher_end_to_end(tmp_path: Path):
    port = free_port()
    base = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    base.update(SIZEWISE_VAR_DIR=str(tmp_path / "var"), SIZEWISE_PORT=str(port))
    env = local_environment(base)
    # Everything the launcher makes stays in the temporary var/ folder.
    assert env["SIZEWISE_DATABASE_URL"] == f"sqlite:///{tmp_path / 'var' / 'sizewise.db'}"
    log = tmp_path / "run_local.log"
    proc = start([sys.executable, "-m", "service.run_local"], base, log)
    api = Api(port)
    try:

        def up() -> bool:
            if proc.poll() is not None:
                raise AssertionError(f"run_local exited early:\n{tail(log)}")
            return api.healthy()

        wait_for(up, 120, "run_local /healthz", step=0.5)
        assert (tmp_path / "var" / "sizewise.db").exists()
        assert (tmp_path / "var" / "broker").is_dir()
        # The README's way in: the token printed at start, and an auditor's from the CLI.
        api = Api(port, wait_for(lambda: _banner_token(log), 30, "the banner's token"))
        auditor = Api(port, _cli_token(env, "auditor"))

        status, created = api.call("POST", "/v1/requests", readme_example_request())
        assert status == 202, created
        rid = created["id"]

        def computed() -> dict | None:
            body = api.call("GET", f"/v1/requests/{rid}")[1]
            return body if body["status"] in TERMINAL else None

        body = wait_for(computed, 90, f"request computed\n{tail(log)}")
        assert body["status"] == "computed", body.get("error")
        # Source: recomputed with statsmodels TTestIndPower (noncentral t, Cohen 1988 eq. 2.3.1);
        # inflating by 1/(1 − dropout) is common practice, no source.
        from statsmodels.stats.power import TTestIndPower

        q = readme_example_request()["question"]
        d = abs(q["effect"]["difference"]) / q["assumptions"]["sd"]
        raw = TTestIndPower().solve_power(effect_size=d, power=q["target_power"], alpha=q["alpha"])
        size = body["result"]["sample_size"]
        assert size["steps"][0]["per_group_raw"][0] == pytest.approx(raw, abs=0.01)
        keep = 1 - q["adjustments"]["dropout"]
        assert size["per_group"][0] in {math.ceil(raw / keep), math.ceil(math.ceil(raw) / keep)}

        # An audit re-run: the auditor's role, the stored question and seed.
        status, rerun = auditor.call("POST", f"/v1/requests/{rid}/reruns", {})
        assert status == 202, rerun

        def rerun_done() -> dict | None:
            got = auditor.call("GET", f"/v1/requests/{rid}/reruns/{rerun['id']}")[1]
            return got if got["status"] in {"done", "failed"} else None

        again = wait_for(rerun_done, 90, f"rerun finished\n{tail(log)}")
        assert again["status"] == "done", again.get("error")
        assert again["identical"] is True and again["differences"] == []
        assert again["record_sha256"] == body["result"]["reproducibility"]["record_sha256"]

        # The demo protocols were loaded at start-up.
        listed = api.call("GET", "/v1/requests?protocol_id=NGH-CRO-2025-014")[1]
        assert listed["total"] == 1

        # A report link opened in a browser (its URL also as the Referer of a click from the
        # page) leaves no secret in the API's log, and the served page is locked down.
        status, link = api.call("POST", f"/v1/requests/{rid}/report-links")
        assert status == 201, link
        signature = link["url"].rsplit(".", 1)[1]
        page = Request(link["url"])
        page.add_header("Referer", link["url"])
        with urlopen(page, timeout=10) as resp:
            assert resp.status == 200
            assert resp.headers["Referrer-Policy"] == "no-referrer"
            assert "default-src 'none'" in resp.headers["Content-Security-Policy"]
        api_log = tmp_path / "var" / "logs" / "api.log"

        def logged() -> bool:
            return "/report?link=" in api_log.read_text()

        wait_for(logged, 30, "the report request in the access log")
        text = api_log.read_text()
        assert signature not in text and "link=[redacted]" in text
        assert api.token not in text
        # The database, its WAL files, the link key and the logs are the service user's alone.
        var = tmp_path / "var"
        for path in (
            var / "sizewise.db",
            var / "sizewise.db-wal",
            var / "secret_key",
            var / "logs" / "api.log",
            var / "logs" / "worker.log",
        ):
            if path.exists() or path.name != "sizewise.db-wal":
                assert path.stat().st_mode & 0o777 == 0o600, path

        os.killpg(proc.pid, signal.SIGTERM)
        try:
            rc = proc.wait(60)
        except subprocess.TimeoutExpired:
            pytest.fail(f"run_local did not stop within 60 s of SIGTERM:\n{tail(log)}")
        assert rc == 0, tail(log)
        assert "sizewise: stopped" in log.read_text()
        assert not api.healthy()
    finally:
        stop_group(proc, grace=5)


def _worker_pid(log: Path) -> int:
    """The pid of the worker process the launcher started last (from its start-up line)."""
    found = re.findall(r"started worker \(pid (\d+),", log.read_text())
    assert found, tail(log)
    return int(found[-1])


def test_the_embedded_worker_survives_kill_9_of_its_pool_and_of_its_process(tmp_path: Path):
    """``make run``: kill both pool children mid-simulation, then the worker process itself;
    the launcher starts a new worker, the sweeper hands it the job, and the record's digits are
    those of an undisturbed run (the engine in this process, same stored question)."""
    import psutil

    from service.engine import canonical_json, compute

    port = free_port()
    base = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    base.update(
        SIZEWISE_VAR_DIR=str(tmp_path / "var"),
        SIZEWISE_PORT=str(port),
        SIZEWISE_LEASE_SECONDS="5",
        SIZEWISE_SWEEP_SECONDS="1",
        SIZEWISE_MAX_ATTEMPTS="6",
    )
    log = tmp_path / "run_local.log"
    proc = start([sys.executable, "-m", "service.run_local"], base, log)
    try:
        wait_for(lambda: _banner_token(log), 120, f"the launcher's banner\n{tail(log)}", step=0.5)
        api = Api(port, _banner_token(log))
        question = {
            "outcome": "ordinal",
            "layout": "two_groups",
            "find": "power",
            "sample_size": {"total": 1000},
            "simulation": {
                "replicates": 12_000,
                "chunk_size": 500,
                "seed": 7300,
                "data": {
                    "control": {"family": "lognormal", "mu": 1.0, "sigma": 0.8},
                    "treatment": {"family": "lognormal", "mu": 1.1, "sigma": 0.8},
                },
            },
        }
        body = readme_example_request() | {"question": question}
        status, created = api.call("POST", "/v1/requests", body)
        assert status == 202, created
        rid = created["id"]

        def running(min_attempts: int):
            def check():
                got = api.call("GET", f"/v1/requests/{rid}")[1]
                assert got["status"] not in TERMINAL, (got["status"], got.get("error"))
                return got["status"] == "running" and got["attempts"] >= min_attempts

            return check

        wait_for(running(1), 60, f"the simulation running\n{tail(log)}", step=0.1)
        worker = psutil.Process(_worker_pid(log))
        children = worker.children()
        assert len(children) == 2, children
        for child in children:
            os.kill(child.pid, signal.SIGKILL)
        # New pool children take the job back (after its lease expires) ...
        wait_for(running(2), 90, f"the job taken back\n{tail(log)}", step=0.1)
        # ... and then the whole worker process dies; the launcher starts another one.
        os.kill(worker.pid, signal.SIGKILL)
        wait_for(lambda: _worker_pid(log) != worker.pid, 30, f"a new worker\n{tail(log)}", step=0.2)

        def ended() -> dict | None:
            got = api.call("GET", f"/v1/requests/{rid}")[1]
            return got if got["status"] in TERMINAL else None

        done = wait_for(ended, 180, f"the request computed\n{tail(log)}", step=0.5)
        assert done["status"] == "computed", done.get("error")
        assert done["attempts"] >= 3
        assert canonical_json(done["result"]) == canonical_json(compute(done["question"]))
        assert "worker exited (code -9); starting it again" in log.read_text()
        assert proc.poll() is None  # the launcher itself kept running

        # The served API logs JSON lines; its line for the submission has the request id that
        # the worker's first attempt repeated (later attempts were sent again by the sweeper).
        logs = tmp_path / "var" / "logs"
        posted = [
            line
            for line in _json_lines(logs / "api.log")
            if line["logger"] == "service.api.requests" and line["message"].startswith("POST ")
        ]
        assert len(posted) == 1 and posted[0]["message"].startswith("POST /v1/requests 202 ")
        claims = [
            line
            for line in _json_lines(logs / "worker.log")
            if line.get("job_id") == rid and "claimed" in line["message"]
        ]
        assert claims and claims[0]["request_id"] == posted[0]["request_id"], claims
    finally:
        stop_group(proc, grace=10)


def _json_lines(path: Path) -> list[dict]:
    """The JSON-object lines of a log (start-up banners and warnings are plain text)."""
    found = []
    for raw in path.read_text(errors="replace").splitlines():
        if raw.startswith("{"):
            found.append(json.loads(raw))
    return found
