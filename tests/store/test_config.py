"""Settings: documented defaults, environment overrides, explicit overrides."""

from __future__ import annotations

import pytest

from service.config import SETTINGS, VAR_DIR, broker_transport_options, load_config

DOCUMENTED = {
    "SIZEWISE_DATABASE_URL",
    "SIZEWISE_BROKER_URL",
    "SIZEWISE_WORKER_CONCURRENCY",
    "SIZEWISE_BROKER_POLL_SECONDS",
    "SIZEWISE_ANSWER_AT_SUBMISSION",
    "SIZEWISE_FANOUT_HELPERS",
    "SIZEWISE_FANOUT_SPLIT_SECONDS",
    "SIZEWISE_SIMULATION_BUDGET",
    "SIZEWISE_LEASE_SECONDS",
    "SIZEWISE_MAX_ATTEMPTS",
    "SIZEWISE_SWEEP_SECONDS",
    "SIZEWISE_VISIBILITY_TIMEOUT",
    "SIZEWISE_TASK_TIME_LIMIT",
    "SIZEWISE_PORT",
    "SIZEWISE_MAX_BODY_BYTES",
    "SIZEWISE_RATE_LIMIT",
    "SIZEWISE_RATELIMIT_STORAGE_URL",
    "SIZEWISE_TOKEN_HOURLY_BUDGET",
    "SIZEWISE_SECRET_KEY",
    "SIZEWISE_FOUR_EYES",
    "SIZEWISE_DESK_SECURE_COOKIE",
    "SIZEWISE_DESK_IDLE_MINUTES",
    # issue 15: absolute links and notifications
    "SIZEWISE_PUBLIC_URL",
    "SIZEWISE_WEBHOOK_ALLOW_HTTP",
    "SIZEWISE_WEBHOOK_ATTEMPTS",
    "SIZEWISE_WEBHOOK_BACKOFF_SECONDS",
    "SIZEWISE_WEBHOOK_POLL_SECONDS",
    "SIZEWISE_WEBHOOK_TIMEOUT_SECONDS",
}


def test_every_setting_is_documented_once():
    names = [s.name for s in SETTINGS]
    assert set(names) == DOCUMENTED and len(names) == len(DOCUMENTED)
    assert all(s.meaning.endswith(".") for s in SETTINGS)


def test_defaults(monkeypatch):
    for name in (*DOCUMENTED, "SIZEWISE_VAR_DIR"):
        monkeypatch.delenv(name, raising=False)
    config = load_config()
    assert config["DATABASE_URL"] == f"sqlite:///{VAR_DIR / 'sizewise.db'}"
    assert config["BROKER_URL"] == "filesystem://"
    assert config["SIMULATION_BUDGET"] == 2_000_000_000
    assert (config["LEASE_SECONDS"], config["MAX_ATTEMPTS"], config["MAX_BODY_BYTES"]) == (
        60,
        3,
        65536,
    )
    assert config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"] == str(VAR_DIR / "broker" / "queue")


def test_environment_then_overrides(monkeypatch):
    monkeypatch.setenv("SIZEWISE_LEASE_SECONDS", "90")
    monkeypatch.setenv("SIZEWISE_PORT", "8123")
    config = load_config({"PORT": 9000, "SIZEWISE_MAX_ATTEMPTS": 5})
    assert (config["LEASE_SECONDS"], config["PORT"], config["MAX_ATTEMPTS"]) == (90, 9000, 5)


def test_bad_environment_value_names_the_variable(monkeypatch):
    monkeypatch.setenv("SIZEWISE_LEASE_SECONDS", "soon")
    with pytest.raises(ValueError, match="SIZEWISE_LEASE_SECONDS='soon'"):
        load_config()


def test_filesystem_broker_folders(tmp_path):
    opts = broker_transport_options(f"filesystem://{tmp_path}")
    # Producer and consumer must read and write the same folder.
    assert opts["data_folder_in"] == opts["data_folder_out"] == str(tmp_path / "queue")
    assert broker_transport_options("redis://127.0.0.1:6379/0") == {}


def test_the_var_folder_moves_the_default_database_and_broker(monkeypatch, tmp_path):
    # The CLI, the API and the workers find the launcher's files when SIZEWISE_VAR_DIR is set.
    for name in ("SIZEWISE_DATABASE_URL", "SIZEWISE_BROKER_URL"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("SIZEWISE_VAR_DIR", str(tmp_path / "var"))
    config = load_config()
    assert config["DATABASE_URL"] == f"sqlite:///{tmp_path / 'var' / 'sizewise.db'}"
    assert config["BROKER_TRANSPORT_OPTIONS"]["data_folder_in"] == str(
        tmp_path / "var" / "broker" / "queue"
    )
    monkeypatch.setenv("SIZEWISE_DATABASE_URL", "sqlite:////elsewhere/x.db")
    assert load_config()["DATABASE_URL"] == "sqlite:////elsewhere/x.db"
