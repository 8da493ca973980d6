"""Settings: one table of defaults, each overridable by an environment variable of the same name.

``SETTINGS`` documents every setting (environment name, default, meaning) so the README table can
be generated from it and checked by a test. ``load_config()`` returns the values keyed without the
``SIZEWISE_`` prefix (``DATABASE_URL``, ``BROKER_URL``, ...), plus the derived
``BROKER_TRANSPORT_OPTIONS`` for kombu's filesystem transport.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any, NamedTuple
from urllib.parse import urlsplit

REPO_ROOT = Path(__file__).resolve().parents[1]
VAR_DIR = REPO_ROOT / "var"
PREFIX = "SIZEWISE_"


def flag(raw: str) -> bool:
    """Parse an on/off setting: 1/true/yes/on or 0/false/no/off (any case)."""
    value = raw.strip().lower()
    if value in ("1", "true", "yes", "on"):
        return True
    if value in ("0", "false", "no", "off"):
        return False
    raise ValueError(f"expected one of 1/true/yes/on or 0/false/no/off; got {raw!r}")


class Setting(NamedTuple):
    """One documented setting: environment name, default, parser and meaning."""

    name: str
    default: Any
    parse: Callable[[str], Any]
    meaning: str


def boolean(raw: str) -> bool:
    """Parse a yes/no setting: true/1/yes/on or false/0/no/off (any case)."""
    value = raw.strip().lower()
    if value in ("true", "1", "yes", "on"):
        return True
    if value in ("false", "0", "no", "off"):
        return False
    raise ValueError(raw)


SETTINGS: tuple[Setting, ...] = (
    Setting(
        "SIZEWISE_DATABASE_URL",
        f"sqlite:///{VAR_DIR / 'sizewise.db'}",
        str,
        "SQLAlchemy URL of the database (SQLite gets WAL and busy_timeout 5000 ms); unset: "
        "sizewise.db under SIZEWISE_VAR_DIR when that is set.",
    ),
    Setting(
        "SIZEWISE_BROKER_URL",
        "filesystem://",
        str,
        "Celery broker URL; filesystem:// keeps messages in folders under var/broker "
        "(filesystem:///some/dir puts them under that folder instead).",
    ),
    Setting("SIZEWISE_WORKER_CONCURRENCY", 2, int, "Worker processes per Celery worker."),
    Setting(
        "SIZEWISE_BROKER_POLL_SECONDS",
        0.02,
        float,
        "How often a worker looks for new messages in a filesystem:// broker's folder.",
    ),
    Setting(
        "SIZEWISE_ANSWER_AT_SUBMISSION",
        True,
        flag,
        "Closed-form questions are computed by the API at submission (off: by the workers).",
    ),
    Setting(
        "SIZEWISE_FANOUT_HELPERS",
        1,
        int,
        "Helper tasks published when a long simulation batch is split: all worker processes "
        "of all workers together, minus one (0: never split).",
    ),
    Setting(
        "SIZEWISE_FANOUT_SPLIT_SECONDS",
        0.25,
        float,
        "A simulation batch estimated to take longer than this is split across workers.",
    ),
    Setting(
        "SIZEWISE_SIMULATION_BUDGET",
        2_000_000_000,
        int,
        "Largest estimated number of random draws one simulation may cost.",
    ),
    Setting(
        "SIZEWISE_LEASE_SECONDS",
        60,
        int,
        "How long a worker's claim on a job lasts unless renewed.",
    ),
    Setting("SIZEWISE_MAX_ATTEMPTS", 3, int, "Claims allowed per job before it is marked failed."),
    Setting(
        "SIZEWISE_SWEEP_SECONDS",
        15,
        int,
        "Interval of the sweeper that republishes unpublished or abandoned jobs.",
    ),
    Setting(
        "SIZEWISE_VISIBILITY_TIMEOUT",
        7200,
        int,
        "Seconds before Redis redelivers an unacknowledged message; must exceed the longest job.",
    ),
    Setting(
        "SIZEWISE_TASK_TIME_LIMIT", 3600, int, "Hard time limit of one task (a backstop), seconds."
    ),
    Setting("SIZEWISE_PORT", 8000, int, "TCP port the HTTP service listens on."),
    Setting(
        "SIZEWISE_MAX_BODY_BYTES",
        65536,
        int,
        "Largest accepted request body; larger bodies get 413.",
    ),
    Setting(
        "SIZEWISE_RATE_LIMIT",
        "600/minute",
        str,
        "Requests one API token may make (all endpoints together), e.g. '600/minute'; "
        "without a valid token the caller's address is counted instead.",
    ),
    Setting(
        "SIZEWISE_RATELIMIT_STORAGE_URL",
        "",
        str,
        "Where the rate-limit counters live. Empty: the broker's Redis when the broker is Redis, "
        "else the SQLite file ratelimit.sqlite under SIZEWISE_VAR_DIR (or var/), so every API "
        "process shares one count; memory:// counts per process (one process only).",
    ),
    Setting(
        "SIZEWISE_TOKEN_HOURLY_BUDGET",
        20_000_000_000,
        int,
        "Estimated random draws one token may cause within an hour: its simulated requests, "
        "reruns, sensitivity grids and robustness panels together.",
    ),
    Setting(
        "SIZEWISE_FOUR_EYES",
        True,
        boolean,
        "Four-eyes review: a request cannot be approved by the token that submitted it nor by a "
        "token of the same name (false, 0 or no turns it off).",
    ),
    Setting(
        "SIZEWISE_SECRET_KEY",
        "",
        str,
        "Key that signs report links (HMAC-SHA256); every API process must share it. Empty: a "
        "random key is made once and kept in secret_key under SIZEWISE_VAR_DIR (or var/).",
    ),
    Setting(
        "SIZEWISE_DESK_SECURE_COOKIE",
        True,
        flag,
        "The desk's session cookie is sent over HTTPS only; make run turns it off for its "
        "plain-HTTP address on 127.0.0.1.",
    ),
    Setting(
        "SIZEWISE_DESK_IDLE_MINUTES",
        30,
        int,
        "A desk session unused for this many minutes ends; the next page asks to sign in again.",
    ),
    Setting(
        "SIZEWISE_PUBLIC_URL",
        "",
        str,
        "Base URL of the API as clients reach it (e.g. https://sizewise.example.org), for the "
        "absolute links in answers and notifications. Empty: the host the caller used.",
    ),
    Setting(
        "SIZEWISE_WEBHOOK_ALLOW_HTTP",
        False,
        flag,
        "Callback URLs may use plain http (local runs; the launcher turns it on). Off: https only.",
    ),
    Setting(
        "SIZEWISE_WEBHOOK_ATTEMPTS",
        8,
        int,
        "Delivery attempts of one notification before it is marked failed.",
    ),
    Setting(
        "SIZEWISE_WEBHOOK_BACKOFF_SECONDS",
        10.0,
        float,
        "Wait after a notification's first failed attempt; each further wait is 4 times longer "
        "(at most 12 hours).",
    ),
    Setting(
        "SIZEWISE_WEBHOOK_POLL_SECONDS",
        1.0,
        float,
        "How often each worker looks for notifications due for delivery.",
    ),
    Setting(
        "SIZEWISE_WEBHOOK_TIMEOUT_SECONDS",
        10.0,
        float,
        "How long one delivery attempt waits for the receiver's answer.",
    ),
)


def var_dir() -> Path:
    """The embedded default's folder: ``SIZEWISE_VAR_DIR``, else the repository's var/."""
    return Path(os.environ.get("SIZEWISE_VAR_DIR") or VAR_DIR).resolve()


def database_url_in(folder: Path) -> str:
    """The SQLite database of the embedded default in ``folder`` (the launcher's and the CLI's)."""
    return f"sqlite:///{folder / 'sizewise.db'}"


def _key(name: str) -> str:
    return name[len(PREFIX) :]


def broker_transport_options(broker_url: str) -> dict[str, str]:
    """Return kombu filesystem-transport folders for a filesystem:// URL (empty dict otherwise)."""
    parts = urlsplit(broker_url)
    if parts.scheme != "filesystem":
        return {}
    # filesystem:// alone means var/broker (under SIZEWISE_VAR_DIR); a path names another root.
    root = Path(parts.path) if parts.path not in ("", "/") else var_dir() / "broker"
    # Producer and consumer share one folder: what the API writes is what the worker reads.
    queue = str(root / "queue")
    return {
        "data_folder_in": queue,
        "data_folder_out": queue,
        "processed_folder": str(root / "processed"),
        "store_processed": True,
    }


def ensure_broker_folders(config: Mapping[str, Any]) -> None:
    """Create the filesystem broker's folders when the broker is filesystem://."""
    opts = config.get("BROKER_TRANSPORT_OPTIONS") or {}
    for key in ("data_folder_in", "data_folder_out", "processed_folder"):
        if key in opts:
            Path(opts[key]).mkdir(parents=True, exist_ok=True)


def load_config(overrides: dict | None = None) -> dict:
    """Return the settings: defaults, then the environment, then ``overrides`` (UPPERCASE keys)."""
    config: dict[str, Any] = {}
    for setting in SETTINGS:
        raw = os.environ.get(setting.name)
        if raw is None or raw == "":
            config[_key(setting.name)] = setting.default
            continue
        try:
            config[_key(setting.name)] = setting.parse(raw)
        except ValueError:
            raise ValueError(
                f"environment variable {setting.name}={raw!r} is not a valid "
                f"{setting.parse.__name__}"
            ) from None
    if not os.environ.get("SIZEWISE_DATABASE_URL"):
        # The same default file as the local launcher's, so `sizewise tokens` finds its database.
        config["DATABASE_URL"] = database_url_in(var_dir())
    for key, value in (overrides or {}).items():
        # Accept both DATABASE_URL and SIZEWISE_DATABASE_URL spellings in overrides.
        config[key[len(PREFIX) :] if key.startswith(PREFIX) else key] = value
    if "BROKER_TRANSPORT_OPTIONS" not in (overrides or {}):
        config["BROKER_TRANSPORT_OPTIONS"] = broker_transport_options(config["BROKER_URL"])
    return config
