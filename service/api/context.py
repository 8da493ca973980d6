"""Access to the per-application objects made by create_app (settings, engine, sessions)."""

from __future__ import annotations

from typing import Any

from flask import current_app
from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker

EXTENSION = "sizewise"


def settings() -> dict[str, Any]:
    """Return the sizewise settings the application was created with."""
    return current_app.extensions[EXTENSION]["config"]


def engine() -> Engine:
    """Return the application's database engine."""
    return current_app.extensions[EXTENSION]["engine"]


def sessions() -> sessionmaker[Session]:
    """Return the application's sessionmaker."""
    return current_app.extensions[EXTENSION]["sessions"]
