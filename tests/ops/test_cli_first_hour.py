"""The `sizewise` command as a newcomer meets it: the launcher's database found through
SIZEWISE_VAR_DIR, a clear word when that file is missing or not migrated, and `report` given a
question instead of a record."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from sqlalchemy import create_engine, select

from service.config import database_url_in
from service.store.migrate import upgrade
from service.store.models import ApiToken

SIZEWISE = Path(sys.executable).with_name("sizewise")
EXAMPLES = Path(__file__).resolve().parents[2] / "service" / "examples"


def _sizewise(var: Path, *args: str, cwd: Path) -> subprocess.CompletedProcess:
    # Only SIZEWISE_VAR_DIR, as after `export SIZEWISE_VAR_DIR=…; make run`.
    env = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    env["SIZEWISE_VAR_DIR"] = str(var)
    return subprocess.run(
        [str(SIZEWISE), *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=120
    )


def test_tokens_use_the_database_under_sizewise_var_dir(tmp_path):
    var = tmp_path / "var"
    var.mkdir()
    upgrade(database_url_in(var))
    done = _sizewise(var, "tokens", "create", "--role", "auditor", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    engine = create_engine(database_url_in(var))
    with engine.connect() as conn:
        roles = conn.execute(select(ApiToken.role)).scalars().all()
    engine.dispose()
    assert roles == ["auditor"]


def test_a_missing_database_file_is_named_with_how_to_create_it(tmp_path):
    var = tmp_path / "var"
    var.mkdir()
    done = _sizewise(var, "tokens", "list", cwd=tmp_path)
    assert done.returncode == 1
    assert f"the database file {var / 'sizewise.db'} does not exist" in done.stderr
    assert "make run" in done.stderr and "alembic upgrade head" in done.stderr
    assert "is it migrated" not in done.stderr
    # Nothing was created on the way: no empty database to confuse the next attempt.
    assert list(var.iterdir()) == []


def test_an_unmigrated_database_file_gets_the_migration_hint(tmp_path):
    var = tmp_path / "var"
    var.mkdir()
    (var / "sizewise.db").touch()
    done = _sizewise(var, "tokens", "list", cwd=tmp_path)
    assert done.returncode == 1
    assert "is it migrated? `alembic upgrade head`" in done.stderr
    assert "Traceback" not in done.stderr


def test_report_given_a_question_says_to_compute_it_first(tmp_path):
    question = EXAMPLES / "northbridge_bp_trial.json"
    done = _sizewise(tmp_path / "var", "report", str(question), cwd=tmp_path)
    assert done.returncode == 2
    assert "is a question, not a result record: compute it first" in done.stderr
    assert f"sizewise compute {question} > record.json" in done.stderr
    # ... and the advice works.
    record = _sizewise(tmp_path / "var", "compute", str(question), cwd=tmp_path)
    assert record.returncode == 0, record.stderr
    (tmp_path / "record.json").write_text(record.stdout)
    assert json.loads(record.stdout)["reproducibility"]["record_sha256"]
    report = _sizewise(tmp_path / "var", "report", "record.json", cwd=tmp_path)
    assert report.returncode == 0, report.stderr
