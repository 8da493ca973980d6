"""docker-compose.yml: the production stack has the services, health checks and commands it needs."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from service.config import SETTINGS
from service.run_local import API_COMMAND, WORKER_COMMAND

yaml = pytest.importorskip("yaml")

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def compose() -> dict:
    return yaml.safe_load((REPO / "docker-compose.yml").read_text())


@pytest.fixture(scope="module")
def services(compose) -> dict:
    return compose["services"]


def _healthcheck(service: dict) -> list[str]:
    test = service["healthcheck"]["test"]
    return test if isinstance(test, list) else ["CMD-SHELL", test]


def test_the_stack_has_every_service(services):
    assert {"postgres", "redis", "migrate", "api", "worker"} <= set(services)


def test_data_services_use_pinned_images_named_volumes_and_health_checks(compose, services):
    assert services["postgres"]["image"] == "postgres:16"
    assert services["redis"]["image"] == "redis:7"
    assert " ".join(_healthcheck(services["postgres"])).count("pg_isready") == 1
    assert _healthcheck(services["redis"])[-2:] == ["redis-cli", "ping"]
    # Redis must persist queued jobs across a restart.
    command = services["redis"]["command"]
    assert "--appendonly" in command and command[command.index("--appendonly") + 1] == "yes"
    volumes = compose.get("volumes") or {}
    for name in ("postgres", "redis"):
        mounted = [str(v).split(":", 1)[0] for v in services[name]["volumes"]]
        assert mounted and all(v in volumes for v in mounted), (name, mounted)


def test_the_image_is_built_once_and_every_app_service_runs_it(services):
    builders = [name for name, service in services.items() if "build" in service]
    assert builders == ["migrate"], builders
    build = services["migrate"]["build"]
    assert build["dockerfile"] == "service/deploy/Dockerfile"
    assert (REPO / build["context"] / build["dockerfile"]).is_file()
    images = {services[name]["image"] for name in ("migrate", "api", "worker")}
    assert images == {services["migrate"]["image"]}, images
    # The others must take the local build, never look for the image in a registry.
    for name in ("api", "worker"):
        assert services[name]["pull_policy"] == "never", name


def test_postgres_password_has_no_silent_default(services):
    text = (REPO / "docker-compose.yml").read_text()
    uses = re.findall(r"\$\{POSTGRES_PASSWORD([^}]*)\}", text)
    assert len(uses) == 2 and all(u.startswith(":?") for u in uses), uses
    assert services["postgres"]["environment"]["POSTGRES_PASSWORD"].startswith(
        "${POSTGRES_PASSWORD:?"
    )
    assert ":${POSTGRES_PASSWORD:?" in services["api"]["environment"]["SIZEWISE_DATABASE_URL"]


def test_workers_are_health_checked_by_a_celery_ping(services):
    check = _healthcheck(services["worker"])
    assert check[0] == "CMD-SHELL"
    command = check[1]
    app = WORKER_COMMAND[WORKER_COMMAND.index("-A") : WORKER_COMMAND.index("-A") + 2]
    assert command.startswith(f"celery {' '.join(app)} inspect ping")
    # Only this container's worker answers for it ($$ is compose's escape for a literal $).
    assert "-d celery@$$HOSTNAME" in command
    # tests/workers/test_worker_healthcheck.py runs this command against a real worker.


def test_migrate_runs_alembic_once_after_postgres_is_healthy(services):
    migrate = services["migrate"]
    assert migrate["command"] == ["alembic", "upgrade", "head"]
    assert migrate["depends_on"]["postgres"]["condition"] == "service_healthy"
    assert migrate.get("restart", "no") == "no"


@pytest.mark.parametrize("name", ["api", "worker"])
def test_app_services_wait_for_the_migration_and_healthy_servers(services, name):
    depends = services[name]["depends_on"]
    assert depends["migrate"]["condition"] == "service_completed_successfully"
    assert depends["redis"]["condition"] == "service_healthy"
    assert depends["postgres"]["condition"] == "service_healthy"


def test_api_and_worker_run_the_launchers_commands(services):
    # One source of truth: the embedded launcher and production start the same programs.
    assert services["api"]["command"] == list(API_COMMAND)
    assert services["worker"]["command"] == list(WORKER_COMMAND)


def test_api_is_health_checked_on_readyz_and_published_on_loopback_only(services):
    api = services["api"]
    assert any("/readyz" in part for part in _healthcheck(api))
    # Inside its container gunicorn listens on every interface; the host publishes loopback only.
    assert "--bind 0.0.0.0:8000" in api["environment"]["GUNICORN_CMD_ARGS"]
    assert [str(p) for p in api["ports"]] == ["127.0.0.1:8000:8000"]
    for name, service in services.items():
        for port in service.get("ports", []):
            assert str(port).startswith("127.0.0.1:"), (name, port)


def test_there_are_at_least_two_workers(services):
    workers = [n for n, s in services.items() if s.get("command") == list(WORKER_COMMAND)]
    replicas = sum((services[n].get("deploy") or {}).get("replicas", 1) for n in workers)
    assert replicas >= 2


@pytest.mark.parametrize("name", ["migrate", "api", "worker"])
def test_app_services_get_every_setting_and_the_production_urls(services, name):
    env = services[name]["environment"]
    assert {s.name for s in SETTINGS} <= set(env), sorted({s.name for s in SETTINGS} - set(env))
    assert env["SIZEWISE_DATABASE_URL"].startswith("postgresql+psycopg://")
    assert "@postgres:5432/" in env["SIZEWISE_DATABASE_URL"]
    assert env["SIZEWISE_BROKER_URL"].startswith("redis://redis:6379")


def test_environment_values_parse_like_the_config_does(services):
    env = services["api"]["environment"]
    for setting in SETTINGS:
        # A value the config cannot parse would stop the service at start-up.
        setting.parse(str(env[setting.name]))
