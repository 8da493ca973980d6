"""Alembic environment: the target URL comes from service.config unless the caller set one."""

from __future__ import annotations

from alembic import context

from service.config import load_config
from service.store.db import make_engine
from service.store.models import Base

config = context.config
target_metadata = Base.metadata


def _url() -> str:
    # service.store.migrate.upgrade(url) passes the URL; the CLI falls back to the settings.
    return config.attributes.get("database_url") or load_config()["DATABASE_URL"]


def run_migrations_offline() -> None:
    """Emit SQL to stdout without a database connection."""
    url = _url()
    context.configure(
        url=url,
        target_metadata=target_metadata,
        literal_binds=True,
        render_as_batch=url.startswith("sqlite"),
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    """Run the migrations against a live connection."""
    url = _url()
    engine = make_engine(url)
    with engine.connect() as connection:
        context.configure(
            connection=connection,
            target_metadata=target_metadata,
            # SQLite cannot ALTER most things; batch mode rebuilds the table instead.
            render_as_batch=connection.dialect.name == "sqlite",
            compare_type=True,
        )
        with context.begin_transaction():
            context.run_migrations()
    engine.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
