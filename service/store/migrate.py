"""Run the Alembic migrations in-process (tests, the CLI and first start-up use this)."""

from __future__ import annotations

from alembic import command
from alembic.config import Config

from service.config import REPO_ROOT


def alembic_config(url: str) -> Config:
    """Return an Alembic Config pointing at migrations/ with ``url`` as the target database."""
    # The URL travels as an attribute, so no ini file (and no % escaping) is involved.
    cfg = Config(attributes={"database_url": url})
    cfg.set_main_option("script_location", str(REPO_ROOT / "migrations"))
    return cfg


def upgrade(url: str, revision: str = "head") -> None:
    """Bring the database at ``url`` to ``revision`` (default: the newest)."""
    command.upgrade(alembic_config(url), revision)
