"""Liveness and readiness probes."""

from __future__ import annotations

import logging
from pathlib import Path
from urllib.parse import urlsplit

from flask import Blueprint, jsonify
from sqlalchemy import text

from service.schemas.api import HealthSchema

from .context import engine, settings
from .docs import operation
from .errors import problem

log = logging.getLogger(__name__)
bp = Blueprint("health", __name__)

PROBE_TIMEOUT_SECONDS = 2


@bp.get("/healthz")
@operation("The process is up", tag="health", response=HealthSchema)
def healthz():
    """Answer 200 while the process runs; checks nothing else."""
    return jsonify({"status": "ok"})


def _database() -> str:
    try:
        with engine().connect() as conn:
            conn.execute(text("SELECT 1"))
    except Exception as exc:  # any failure means "not ready"; the reason goes to the body
        log.warning("readiness: database check failed: %s", exc)
        return f"unreachable: {type(exc).__name__}"
    return "ok"


def _broker() -> str:
    config = settings()
    url = str(config["BROKER_URL"])
    scheme = urlsplit(url).scheme
    try:
        if scheme == "filesystem":
            opts = config.get("BROKER_TRANSPORT_OPTIONS") or {}
            missing = [
                opts[k]
                for k in ("data_folder_in", "data_folder_out", "processed_folder")
                if k in opts and not Path(opts[k]).is_dir()
            ]
            return f"missing folders: {', '.join(missing)}" if missing else "ok"
        if scheme in ("redis", "rediss"):
            import redis

            client = redis.Redis.from_url(
                url,
                socket_connect_timeout=PROBE_TIMEOUT_SECONDS,
                socket_timeout=PROBE_TIMEOUT_SECONDS,
            )
            try:
                client.ping()
            finally:
                client.close()
            return "ok"
        from kombu import Connection

        with Connection(url, connect_timeout=PROBE_TIMEOUT_SECONDS) as conn:
            conn.ensure_connection(max_retries=1)
        return "ok"
    except Exception as exc:  # unreachable broker: report, do not raise
        log.warning("readiness: broker check failed: %s", exc)
        return f"unreachable: {type(exc).__name__}"


@bp.get("/readyz")
@operation("The database and the broker answer", tag="health", response=HealthSchema, errors=(503,))
def readyz():
    """Answer 200 when the database runs SELECT 1 and the broker is reachable, else 503."""
    checks = {"database": _database(), "broker": _broker()}
    if all(v == "ok" for v in checks.values()):
        return jsonify({"status": "ready", "checks": checks})
    failing = ", ".join(k for k, v in checks.items() if v != "ok")
    return problem(
        503, "Service unavailable", f"not ready: {failing}", slug="not-ready", checks=checks
    )
