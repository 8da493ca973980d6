"""The served application hands its start-up heap to the permanent generation (gc.freeze).

A full garbage collection walks every tracked object; in a gunicorn worker that was about
180,000 objects of Flask, SQLAlchemy, marshmallow, numpy and scipy, and the walk stopped every
thread of the process. ``create_app()`` as gunicorn calls it (no config) freezes them; a test's
``create_app(config)`` leaves the collector alone. Each case runs in a fresh interpreter, so
the count is the application's own.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
PROBE = """
import gc, json, sys
from service import create_app
before = gc.get_freeze_count()
app = create_app({config})
loaded = "service.engine.designs.continuous_two_groups" in sys.modules
if loaded:  # a design's field list: tracked by the collector unless it was frozen
    fields = sys.modules["service.engine.designs.continuous_two_groups"].DESIGN.fields
    loaded = [loaded, any(o is fields for o in gc.get_objects())]
print(json.dumps([before, gc.get_freeze_count(), len(gc.get_objects(generation=2)), loaded]))
"""


def _probe(tmp_path: Path, config: str) -> list[int]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    env.update(
        SIZEWISE_VAR_DIR=str(tmp_path),
        SIZEWISE_DATABASE_URL=f"sqlite:///{tmp_path / 'sizewise.db'}",
        SIZEWISE_BROKER_URL=f"filesystem://{tmp_path / 'broker'}",
        SIZEWISE_SECRET_KEY="heap-check",
        PYTHONPATH=str(REPO),
    )
    out = subprocess.run(
        [sys.executable, "-c", PROBE.format(config=config)],
        cwd=REPO, env=env, capture_output=True, text=True, timeout=120,
    )  # fmt: skip
    assert out.returncode == 0, out.stderr
    import json

    return json.loads(out.stdout.strip().splitlines()[-1])


def test_the_served_app_freezes_its_start_up_heap(tmp_path: Path):
    before, frozen, old, designs = _probe(tmp_path, "")
    assert before == 0
    # Everything loaded by then is frozen: tens of thousands of objects, none left in the
    # oldest generation for a full collection to walk.
    assert frozen > 50_000
    assert old == 0
    # The design modules (loaded on first use otherwise: the first question paid for it) are
    # loaded at start-up and frozen with the rest.
    assert designs == [True, False]


def test_an_app_built_with_a_config_leaves_the_collector_alone(tmp_path: Path):
    config = "{'DATABASE_URL': 'sqlite:///%s', 'TESTING': True}" % (tmp_path / "t.db")
    _before, frozen, _old, _designs = _probe(tmp_path, config)
    assert frozen == 0
