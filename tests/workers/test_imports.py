"""Each worker module imports alone in a fresh interpreter (no import circle among them)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
# warm, sessions, fanout ← celery_app ← queue ← running, sweeper ← tasks ← exploration_tasks,
# webhook_tasks: a module imports only those before it.
ORDER = (
    "warm",
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


def test_the_worker_loads_the_simulation_code_before_its_pool_forks():
    # The worker's own start-up path: the app's included modules, then worker_init, which
    # Celery sends in the main process before forking pool children (workers/warm.py).
    script = (
        "import sys\n"
        "from celery.signals import worker_init\n"
        "from workers.celery_app import app\n"
        "app.loader.import_default_modules()\n"
        "assert 'service.engine.simulate' not in sys.modules, 'loaded before the signal'\n"
        "worker_init.send(sender=None)\n"
        "print('service.engine.simulate' in sys.modules)\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", script], cwd=REPO, capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip() == "True"


def test_the_warm_up_chunk_is_built_by_the_engine_and_runs():
    # The warm-up goes through the API's validation and the engine's plan, so a change of the
    # chunk format cannot leave it behind: it must run and count its replicates.
    from workers.warm import warm

    done = warm()
    assert done["replicates"] == 10
    assert 0 <= done["rejections"] <= 10
