"""The launcher's banner: its example exists and is accepted, and a restart keeps the demo token
(or says plainly that it replaced a lost one)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from service.run_local import DEMO_TOKEN_FILE, EXAMPLE_FILE, REPO_ROOT, example_body

# One launcher start-up (prepare) in a fresh process: prepare() sets os.environ for its children.
PREPARE = """
import json, os, sys
from pathlib import Path
from service.run_local import demo_token_lines, local_environment, prepare
env = local_environment()
demo = prepare(env)
print(json.dumps({"secret": demo.secret, "kept": demo.kept, "revoked": list(demo.revoked),
                  "banner": demo_token_lines(Path(env["SIZEWISE_VAR_DIR"]), demo)}))
"""


def test_the_banner_example_exists_and_is_accepted(api):
    assert (REPO_ROOT / "service" / "examples" / EXAMPLE_FILE).is_file()
    body = example_body()
    assert body["question"] == json.loads(
        (REPO_ROOT / "service" / "examples" / EXAMPLE_FILE).read_text()
    )
    r = api.submit(body, role="statistician", name="demo statistician")
    assert r.status_code == 202, r.get_json()


def _start(var: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    env["SIZEWISE_VAR_DIR"] = str(var)
    done = subprocess.run(
        [sys.executable, "-c", PREPARE],
        cwd=REPO_ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_a_restart_keeps_the_demo_token_and_a_lost_one_is_replaced_out_loud(tmp_path):
    var = tmp_path / "var"
    first = _start(var)
    kept_file = var / DEMO_TOKEN_FILE
    assert not first["kept"] and first["revoked"] == []
    assert f"(new, kept in {kept_file} for the next starts): {first['secret']}" in first["banner"]
    assert kept_file.read_text().strip() == first["secret"]
    assert kept_file.stat().st_mode & 0o777 == 0o600

    again = _start(var)
    assert again["kept"] and again["secret"] == first["secret"]
    assert f"(kept from the last start, in {kept_file}): {first['secret']}" in again["banner"]

    kept_file.unlink()
    third = _start(var)
    assert not third["kept"] and third["secret"] != first["secret"]
    assert len(third["revoked"]) == 1
    assert f"the earlier demo token ({third['revoked'][0]}) was revoked" in third["banner"]
    assert f"its secret was not in {kept_file}" in third["banner"]
