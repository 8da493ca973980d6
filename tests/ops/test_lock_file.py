"""service/deploy/requirements.lock pins every dependency to the version the service runs with."""

from __future__ import annotations

import re
import shutil
import subprocess
import tomllib
from importlib import metadata
from pathlib import Path

import pytest
from packaging.markers import default_environment
from packaging.requirements import Requirement
from packaging.utils import canonicalize_name

from service.bundle import LOCK_FILE

REPO = Path(__file__).resolve().parents[2]
LOCK = REPO / LOCK_FILE
PIN = re.compile(r"^([A-Za-z0-9][A-Za-z0-9._-]*)==([^\s;]+)$")


def _locked() -> dict[str, str]:
    pins = {}
    for line in LOCK.read_text().splitlines():
        if not line.strip() or line.startswith("#"):
            continue
        match = PIN.match(line)
        assert match, f"{LOCK_FILE}: not an exact pin: {line!r}"
        pins[canonicalize_name(match.group(1))] = match.group(2)
    return pins


def _declared() -> list[Requirement]:
    project = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]
    extras = project.get("optional-dependencies", {})
    return [Requirement(r) for r in [*project["dependencies"], *extras.get("test", [])]]


def _extra_requirements(req: Requirement) -> list[Requirement]:
    """What the requirement's extras (psycopg[binary], celery[redis]) pull in, as installed."""
    found = []
    for raw in metadata.requires(req.name) or []:
        dep = Requirement(raw)
        for extra in req.extras:
            env = default_environment() | {"extra": extra}
            if dep.marker is not None and dep.marker.evaluate(env):
                found.append(dep)
    return found


def test_the_lock_lives_in_an_allowed_place_and_says_how_it_was_made():
    assert LOCK.is_file()
    assert LOCK.parent == REPO / "service" / "deploy"
    head = LOCK.read_text().splitlines()[:3]
    assert any("make lock" in line for line in head)
    assert any(re.search(r"Python 3\.\d+\.\d+", line) for line in head)


def test_the_lock_covers_every_dependency_in_pyproject_with_an_allowed_version():
    pins = _locked()
    for req in _declared():
        for dep in [req, *_extra_requirements(req)]:
            name = canonicalize_name(dep.name)
            assert name in pins, f"{LOCK_FILE} lacks {dep.name} (pyproject: {req}); run make lock"
            assert dep.specifier.contains(pins[name], prereleases=True), (
                f"{LOCK_FILE} pins {dep.name}=={pins[name]}, outside {dep.specifier}"
            )


def test_the_environment_running_these_tests_is_the_locked_one():
    # Installs take the lock as constraints, so what runs is what an auditor rebuilds.
    pins = _locked()
    for req in _declared():
        installed = metadata.version(req.name)
        assert installed == pins[canonicalize_name(req.name)], (
            f"{req.name} {installed} is installed but {LOCK_FILE} pins "
            f"{pins[canonicalize_name(req.name)]}: run make install (or make lock)"
        )


def test_installs_use_the_lock_and_make_lock_refreshes_it():
    if shutil.which("make") is None:
        pytest.skip("make is not installed")
    install = subprocess.run(
        ["make", "-n", "-B", "install"], cwd=REPO, capture_output=True, text=True, timeout=30
    )
    assert f"pip install -e '.[test]' -c {LOCK_FILE}" in install.stdout, install.stdout
    lock = subprocess.run(
        ["make", "-n", "lock"], cwd=REPO, capture_output=True, text=True, timeout=30
    )
    assert "pip freeze --exclude-editable" in lock.stdout and f"> {LOCK_FILE}" in lock.stdout
    dockerfile = (REPO / "service" / "deploy" / "Dockerfile").read_text()
    assert f"pip install -c {LOCK_FILE} ." in dockerfile


def test_readme_tells_an_auditor_how_to_rebuild_the_environment():
    readme = (REPO / "README.md").read_text()
    match = re.search(r"^## Audit bundles\n(.*?)(?=^## |\Z)", readme, re.M | re.S)
    assert match, "README has no '## Audit bundles' section"
    section = match.group(1)
    assert f"pip install -r {LOCK_FILE}" in section
    assert "pip install --no-deps ." in section and "sizewise verify bundle.json" in section
    assert "GET /v1/requests/{id}/bundle" in section and "make lock" in section
