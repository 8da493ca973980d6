"""Each worker module imports alone in a fresh interpreter (no import circle among them)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
# sessions, fanout ← celery_app ← queue ← running, sweeper ← tasks ← exploration_tasks,
# webhook_tasks: a module imports only those before it.
ORDER = (
    "sessions",
    "fanout",
    "celery_app",
    "queue",
    "running",
    "sweeper",
    "tasks",
    "exploration_tasks",
    "webhook_tasks",
)
MODULES = ORDER


@pytest.mark.parametrize("name", MODULES)
def test_module_imports_alone(name):
    done = subprocess.run(
        [sys.executable, "-c", f"import workers.{name}"],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr[-2000:]


@pytest.mark.parametrize("name", ORDER)
def test_worker_imports_point_one_way(name):
    tree = ast.parse((REPO / "workers" / f"{name}.py").read_text())
    imported = set()
    for node in ast.walk(tree):  # function-level imports count too: no hidden circle
        if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("workers."):
            imported.add(node.module.split(".")[1])
        elif isinstance(node, ast.Import):
            imported.update(
                a.name.split(".")[1] for a in node.names if a.name.startswith("workers.")
            )
    allowed = set(ORDER[: ORDER.index(name)])
    assert imported <= allowed, f"workers.{name} imports {sorted(imported - allowed)}"


@pytest.mark.parametrize("name", ORDER)
def test_no_worker_module_imports_a_private_name(name):
    tree = ast.parse((REPO / "workers" / f"{name}.py").read_text())
    private = [
        f"{node.module}.{alias.name}"
        for node in ast.walk(tree)
        if isinstance(node, ast.ImportFrom)
        and (node.module or "").startswith(("workers", "service"))
        for alias in node.names
        if alias.name.startswith("_")
    ]
    assert private == [], f"workers.{name} imports private names: {private}"
