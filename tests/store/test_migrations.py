"""Alembic builds the schema on SQLite and PostgreSQL, and it matches the models exactly."""

from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import inspect

from service.store.db import make_engine
from service.store.models import Base


def test_upgrade_head_builds_every_table(database_url):
    engine = make_engine(database_url)
    try:
        names = set(inspect(engine).get_table_names())
    finally:
        engine.dispose()
    assert {"requests", "results", "reruns", "chunk_results", "audit_events"} <= names
    assert "alembic_version" in names


def test_autogenerate_finds_no_difference(database_url):
    engine = make_engine(database_url)
    try:
        with engine.connect() as conn:
            context = MigrationContext.configure(conn, opts={"compare_type": True})
            diff = compare_metadata(context, Base.metadata)
    finally:
        engine.dispose()
    assert diff == []


def test_sqlite_connections_use_wal_and_busy_timeout(tmp_path):
    engine = make_engine(f"sqlite:///{tmp_path / 'wal.db'}")
    try:
        with engine.connect() as conn:
            mode = conn.exec_driver_sql("PRAGMA journal_mode").scalar()
            timeout = conn.exec_driver_sql("PRAGMA busy_timeout").scalar()
    finally:
        engine.dispose()
    assert (mode, timeout) == ("wal", 5000)
