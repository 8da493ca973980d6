"""The Celery application, built from sizewise's own config (service.config.load_config()).

Run a worker with ``celery -A workers.celery_app worker --pool prefork --concurrency 2``.
Every Celery setting lives in :func:`celery_settings`, one dict, so the queue's behaviour can be
read (and tested) in one place. Our database is the source of truth: results are not stored in
Celery, tasks take an id only, and every task is safe to run twice.

Imports run one way only: warm, sessions, fanout ← celery_app ← queue ← running, sweeper ← tasks ←
exploration_tasks (tests/workers/test_imports.py). This module imports no other worker module;
the worker imports the tasks through ``include``.
"""

from __future__ import annotations

from pathlib import Path

from celery import Celery
from celery.signals import setup_logging
from kombu import Queue
from kombu.transport import TRANSPORT_ALIASES

from service import jsonlog
from service.config import broker_transport_options, load_config

# filesystem:// uses kombu's folder transport with atomic message files (see fs_transport).
TRANSPORT_ALIASES["filesystem"] = "workers.fs_transport:Transport"

QUEUE = "sizewise"
# Helper tasks (shared work units of a long simulation) wait here, never ahead of a request.
HELPER_QUEUE = "sizewise.helpers"

TASK_NAMES = {
    "request": "sizewise.run_request",
    "rerun": "sizewise.run_rerun",
    "exploration": "sizewise.run_exploration",
    # the one chunk task of every job: computes pending work units of a running job
    "helper": "sizewise.run_helper",
    "sweep": "sizewise.sweep",
}


def _transport_options(config: dict) -> dict:
    """Broker transport options: the visibility timeout, plus folders for the filesystem broker."""
    url = str(config["BROKER_URL"])
    options: dict = dict(config.get("BROKER_TRANSPORT_OPTIONS") or {})
    options["visibility_timeout"] = int(config["VISIBILITY_TIMEOUT"])
    if url.startswith("filesystem://"):
        if "data_folder_in" not in options:
            options.update(broker_transport_options(url))
        # kombu keeps exchange tables in control_folder, relative to the cwd unless set.
        root = Path(options["processed_folder"]).parent
        options.setdefault("control_folder", str(root / "control"))
        for key in ("data_folder_in", "data_folder_out", "processed_folder", "control_folder"):
            Path(options[key]).mkdir(parents=True, exist_ok=True)
        # kombu's default is one look at the folder per second: a queue that answers in seconds.
        options.setdefault("polling_interval", float(config.get("BROKER_POLL_SECONDS", 0.02)))
    elif url.startswith(("redis://", "rediss://")):
        # A dead Redis must fail the API's publish fast rather than hang a request thread.
        options.setdefault("socket_connect_timeout", 3)
        options.setdefault("socket_timeout", 10)
    return options


def celery_settings(config: dict) -> dict:
    """Return every Celery setting sizewise uses, derived from the service config."""
    visibility = int(config["VISIBILITY_TIMEOUT"])
    hard = int(config["TASK_TIME_LIMIT"])
    # The hard limit must stay below the visibility timeout, or Redis redelivers a running job.
    hard = min(hard, max(visibility - 60, 1))
    soft = max(hard - 30, int(hard * 0.9), 1) if hard > 60 else max(hard - 1, 1)
    transport = _transport_options(config)
    return {
        "broker_url": config["BROKER_URL"],
        "broker_transport_options": transport,
        "result_backend_transport_options": {"visibility_timeout": visibility},
        # Celery 5.5+ also reads the app-level key (e.g. when it resets unacked messages on
        # shutdown); it must equal the transport's, or the two clocks disagree.
        "visibility_timeout": visibility,
        "broker_connection_retry_on_startup": True,
        "broker_connection_timeout": 3,
        "task_serializer": "json",
        "result_serializer": "json",
        "accept_content": ["json"],
        "event_serializer": "json",
        "task_ignore_result": True,
        "task_store_errors_even_if_ignored": False,
        "task_acks_late": True,
        "task_reject_on_worker_lost": True,
        "worker_prefetch_multiplier": 1,
        "worker_cancel_long_running_tasks_on_connection_loss": True,
        "worker_hijack_root_logger": False,
        "task_publish_retry": True,
        "task_publish_retry_policy": {
            "max_retries": 3,
            "interval_start": 0,
            "interval_step": 0.5,
            "interval_max": 2,
        },
        "task_time_limit": hard,
        "task_soft_time_limit": soft,
        "task_default_queue": QUEUE,
        # Every worker consumes both queues (requests listed first); helpers go to their own.
        "task_queues": (
            Queue(QUEUE, routing_key=QUEUE),
            Queue(HELPER_QUEUE, routing_key=HELPER_QUEUE),
        ),
        "task_routes": {TASK_NAMES["helper"]: {"queue": HELPER_QUEUE, "routing_key": HELPER_QUEUE}},
        "task_create_missing_queues": True,
        "worker_concurrency": int(config.get("WORKER_CONCURRENCY", 2)),
        "timezone": "UTC",
        "enable_utc": True,
    }


def make_celery(config: dict) -> Celery:
    """Build the Celery app for ``config`` (the dict from service.config.load_config())."""
    app = Celery(
        "sizewise",
        include=[
            "workers.tasks",
            "workers.exploration_tasks",
            "workers.webhook_tasks",
            "workers.warm",
        ],
    )
    app.conf.update(celery_settings(config))
    # The tasks read the service config from here (database URL, lease, budget).
    app.conf.sizewise = dict(config)
    return app


@setup_logging.connect
def _json_logging(loglevel=None, **_kwargs) -> None:
    """The worker logs JSON lines (service.jsonlog); connecting here replaces Celery's set-up."""
    jsonlog.configure(loglevel or "INFO")


# SIZEWISE_* environment variables override the defaults (service.config).
app = make_celery(load_config())
