"""Makefile, .ci/run, README.md and LICENSE: the build entry points do what the README promises."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import pytest

from service.config import SETTINGS

from ._procs import readme_example_request

REPO = Path(__file__).resolve().parents[2]
README = (REPO / "README.md").read_text()


def _section(title: str) -> str:
    match = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## |\Z)", README, re.M | re.S)
    assert match, f"README has no '## {title}' section"
    return match.group(1)


# --- Makefile -----------------------------------------------------------------------------


@pytest.fixture
def make_dir(tmp_path: Path) -> Path:
    if shutil.which("make") is None:
        pytest.skip("make is not installed")
    shutil.copy(REPO / "Makefile", tmp_path / "Makefile")
    shutil.copy(REPO / "pyproject.toml", tmp_path / "pyproject.toml")
    return tmp_path


def _dry_run(folder: Path, target: str) -> str:
    done = subprocess.run(
        ["make", "-n", target], cwd=folder, capture_output=True, text=True, timeout=30
    )
    assert done.returncode == 0, done.stderr
    return done.stdout


@pytest.mark.parametrize("target", ["run", "test"])
def test_make_creates_the_venv_and_installs_when_missing(make_dir, target):
    out = _dry_run(make_dir, target)
    assert "-m venv .venv" in out
    assert ".venv/bin/python -m pip install -e '.[test]'" in out


def test_make_reinstalls_only_when_pyproject_is_newer_than_the_stamp(make_dir):
    (make_dir / ".venv" / "bin").mkdir(parents=True)
    (make_dir / ".venv" / "bin" / "python").touch()
    stamp = make_dir / ".venv" / ".sizewise-installed"
    stamp.touch()
    old = time.time() - 100
    os.utime(make_dir / "pyproject.toml", (old, old))
    out = _dry_run(make_dir, "test")
    assert "pip install" not in out and "-m venv" not in out
    assert ".venv/bin/python -m pytest tests/" in out
    os.utime(stamp, (old - 100, old - 100))
    assert "pip install -e '.[test]'" in _dry_run(make_dir, "test")


def test_make_targets_run_the_documented_commands(make_dir):
    assert ".venv/bin/python -m service.run_local" in _dry_run(make_dir, "run")
    assert ".venv/bin/python -m tests.bench.bench_engine" in _dry_run(make_dir, "bench")
    lint = _dry_run(make_dir, "lint")
    assert "ruff check ." in lint and "ruff format --check ." in lint


# --- .ci/run with stand-ins for make and the servers ----------------------------------------

FAKE_MAKE = """#!/usr/bin/env bash
echo "make $*" >> "$CI_FAKE_LOG"
if [ "$1" = test ]; then
    junit=${2#PYTEST_ARGS=--junitxml=}
    printf '<testsuites><testsuite name="pytest" tests="%s"/></testsuites>' "$CI_FAKE_TESTS" > "$junit"
    exit "$CI_FAKE_RC"
fi
"""
FAKE_SERVER = {
    # Each stand-in server answers once its start command has left a marker file.
    "pg_isready": '[ -e "$CI_FAKE_DIR/pg" ]',
    "pg_ctlcluster": 'echo "pg_ctlcluster $*" >> "$CI_FAKE_LOG"; touch "$CI_FAKE_DIR/pg"',
    "redis-cli": '[ -e "$CI_FAKE_DIR/redis" ] && echo PONG',
    "redis-server": 'echo "redis-server $*" >> "$CI_FAKE_LOG"; touch "$CI_FAKE_DIR/redis"',
}


@pytest.fixture
def ci_tree(tmp_path: Path) -> Path:
    if not Path("/etc/postgresql").is_dir():
        pytest.skip(".ci/run names the cluster from /etc/postgresql")
    tree = tmp_path / "repo"
    (tree / ".ci").mkdir(parents=True)
    shutil.copy(REPO / ".ci" / "run", tree / ".ci" / "run")
    (tree / ".venv" / "bin").mkdir(parents=True)
    (tree / ".venv" / "bin" / "python").symlink_to(sys.executable)
    bin_dir = tmp_path / "bin"
    bin_dir.mkdir()
    (bin_dir / "make").write_text(FAKE_MAKE)
    for name, body in FAKE_SERVER.items():
        (bin_dir / name).write_text(f"#!/usr/bin/env bash\n{body}\n")
    for script in bin_dir.iterdir():
        script.chmod(0o755)
    return tree


def _ci(tree: Path, *, tests: int, rc: int, servers_up: bool) -> tuple[int, str]:
    fake = tree.parent
    if servers_up:
        (fake / "pg").touch()
        (fake / "redis").touch()
    env = dict(
        os.environ,
        PATH=f"{fake / 'bin'}:{os.environ['PATH']}",
        CI_FAKE_DIR=str(fake),
        CI_FAKE_LOG=str(fake / "log"),
        CI_FAKE_TESTS=str(tests),
        CI_FAKE_RC=str(rc),
    )
    done = subprocess.run(
        ["bash", str(tree / ".ci" / "run")], env=env, capture_output=True, text=True, timeout=60
    )
    log = (fake / "log").read_text() if (fake / "log").exists() else ""
    return done.returncode, log


def test_ci_starts_missing_servers_then_installs_and_tests(ci_tree):
    rc, log = _ci(ci_tree, tests=12, rc=0, servers_up=False)
    assert rc == 0
    lines = log.splitlines()
    assert lines[0] == "make install"
    assert any(line.startswith("pg_ctlcluster --skip-systemctl-redirect") for line in lines)
    assert any(line.startswith("redis-server --daemonize yes") for line in lines)
    assert lines[-1].startswith("make test PYTEST_ARGS=--junitxml=")


def test_ci_leaves_running_servers_alone(ci_tree):
    rc, log = _ci(ci_tree, tests=3, rc=0, servers_up=True)
    assert rc == 0
    assert "pg_ctlcluster" not in log and "redis-server" not in log


def test_ci_fails_when_no_test_was_collected(ci_tree):
    # pytest's "no tests collected" must not pass CI, even if every layer reported success.
    rc, _ = _ci(ci_tree, tests=0, rc=0, servers_up=True)
    assert rc == 5


def test_ci_fails_when_the_tests_fail(ci_tree):
    rc, _ = _ci(ci_tree, tests=7, rc=2, servers_up=True)
    assert rc != 0


def test_ci_script_is_strict_bash():
    text = (REPO / ".ci" / "run").read_text()
    assert text.startswith("#!/usr/bin/env bash\n")
    assert "set -euo pipefail" in text
    assert subprocess.run(["bash", "-n", str(REPO / ".ci" / "run")], timeout=10).returncode == 0


# --- README and LICENSE -------------------------------------------------------------------


def test_readme_opens_with_one_paragraph_stating_the_job():
    intro = README.split("\n## ", 1)[0].split("\n", 1)[1].strip()
    assert "\n\n" not in intro, "the opening must be a single paragraph"
    for phrase in ("biostatistics core", "ethics", "grant", "JSON", "Monte Carlo", "audit"):
        assert phrase in intro, phrase


def test_quick_start_is_exactly_make_run_and_make_test():
    blocks = re.findall(r"```sh\n(.*?)```", _section("Quick start"), re.S)
    assert blocks, "Quick start has no command block"
    assert blocks[0].split("\n")[:-1] == ["make run", "make test"]


def test_readme_documents_every_setting_with_its_default():
    table = _section("Configuration")
    for setting in SETTINGS:
        row = next((r for r in table.splitlines() if r.startswith(f"| `{setting.name}` |")), None)
        assert row is not None, f"README lacks {setting.name}"
        default = str(setting.default).replace(str(REPO), "<repo>")
        assert f"| `{default}` |" in row, row


def test_readme_keeps_the_sections_the_lead_completes():
    _section("The question")
    _section("The result record")


def test_readme_cautions_name_review_and_the_rules_that_govern():
    cautions = _section("Cautions")
    assert "planning aid" in cautions and "statistician" in cautions
    assert "Ethics committees" in cautions and "regulators" in cautions


def test_readme_lists_every_api_route(tmp_path):
    from service import create_app

    app = create_app(
        {"DATABASE_URL": f"sqlite:///{tmp_path / 'r.db'}", "BROKER_URL": f"filesystem://{tmp_path}"}
    )
    listed = _section("API endpoints")
    for rule in app.url_map.iter_rules():
        # The desk's pages are described in README's "The desk", not among the API's routes.
        if rule.endpoint == "static" or rule.endpoint.startswith("desk."):
            continue
        path = re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", rule.rule)
        path = path.replace("{request_id}", "{id}")
        for method in sorted(rule.methods - {"HEAD", "OPTIONS"}):
            assert f"`{method} {path}`" in listed, f"README lacks {method} {path}"


def test_readme_example_request_is_a_valid_submission():
    from service.schemas.requests import RequestCreateSchema

    loaded = RequestCreateSchema().load(readme_example_request())
    assert (loaded["question"]["outcome"], loaded["question"]["layout"]) == (
        "continuous",
        "two_groups",
    )
    assert loaded["protocol"]["id"].startswith("NGH-")


def test_license_is_the_full_apache_2_text():
    text = (REPO / "LICENSE").read_text()
    assert "Apache License" in text and "Version 2.0, January 2004" in text
    assert "TERMS AND CONDITIONS FOR USE, REPRODUCTION, AND DISTRIBUTION" in text
    assert "END OF TERMS AND CONDITIONS" in text
    assert len(text) > 10_000
    project = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]
    assert project["license"] == "Apache-2.0"
