"""The queue boundary: hand a job id to the broker, briefly and boundedly.

The API calls :func:`publish_and_mark` only after its database commit; a False return is not an error
for the caller: the job stays unpublished (``published_at`` null) and the sweeper publishes it
later. Nothing here waits for a task's result — the database is the source of truth.
"""

from __future__ import annotations

import logging
import threading

from celery import Celery

from service import jsonlog
from service.store import jobs
from service.store.db import session_scope
from workers.celery_app import TASK_NAMES, make_celery

log = logging.getLogger(__name__)

# A dead broker must cost the API well under a few seconds, never a hung request thread.
PUBLISH_RETRY_POLICY = {
    "max_retries": 2,
    "interval_start": 0,
    "interval_step": 0.2,
    "interval_max": 0.5,
}

# The message header that carries the HTTP request id of the submission (service.jsonlog): the
# task's arguments stay ids only, and the worker repeats the id on the job's log lines.
REQUEST_ID_HEADER = "sizewise_request_id"

_APPS: dict[tuple, Celery] = {}
_APPS_LOCK = threading.Lock()


def _app(config: dict) -> Celery:
    """Return a cached Celery app for the config's broker (one per broker URL and options)."""
    key = (
        str(config["BROKER_URL"]),
        repr(sorted((config.get("BROKER_TRANSPORT_OPTIONS") or {}).items())),
        int(config["VISIBILITY_TIMEOUT"]),
    )
    with _APPS_LOCK:
        app = _APPS.get(key)
        if app is None:
            app = make_celery(config)
            _APPS[key] = app
    return app


def _send(name: str, args: list, config: dict) -> bool:
    # The request id in force (the API's HTTP request, or the job a worker runs) goes along.
    request_id = jsonlog.current().get("request_id")
    headers = {REQUEST_ID_HEADER: request_id} if request_id else None
    try:
        _app(config).send_task(
            name,
            args=args,
            retry=True,
            retry_policy=PUBLISH_RETRY_POLICY,
            ignore_result=True,
            headers=headers,
        )
    except Exception as exc:  # kombu raises several types for a dead broker; all mean "later"
        log.warning("could not publish %s%s: %s", name, tuple(args[:2]), exc)
        return False
    return True


def publish(kind: str, job_id: str, config: dict) -> bool:
    """Send the task of a job (``jobs.JOB_KINDS``); True when the broker took it, else False."""
    jobs.job_kind(kind)  # ValueError naming the jobs for anything else
    return _send(TASK_NAMES[kind], [job_id], config)


def publish_and_mark(kind: str, job_id: str, config: dict, factory) -> bool:
    """Publish the job, then set its outbox marker: the one path of the API, worker and sweeper.

    False (nothing marked) when the broker refused; the sweeper publishes the job later. A
    marker that cannot be written after the broker took the task is only logged: the job then
    looks unsent and is published once more, which is harmless (one worker can claim it).
    """
    if not publish(kind, job_id, config):
        return False
    try:
        with session_scope(factory) as session:
            jobs.mark_published(session, kind, job_id)
    except Exception:  # the task is sent; a missing marker costs one harmless republish
        log.exception("could not mark %s %s published", kind, job_id)
    return True


def publish_explorations(ids: list[str], config: dict, factory) -> None:
    """Publish the explorations that waited for a result just stored (else the sweeper does).

    The one path of the API (after answering at submission) and of a worker (after computing).
    """
    for exploration_id in ids:
        publish_and_mark("exploration", exploration_id, config, factory)


def publish_helpers(kind: str, job_id: str, count: int, config: dict) -> int:
    """Send ``count`` helper tasks for a job's work units (helper queue); return how many went."""
    jobs.job_kind(kind)
    sent = 0
    for _ in range(max(int(count), 0)):
        if not _send(TASK_NAMES["helper"], [kind, job_id], config):
            break  # the broker is down: the orchestrator computes the units itself
        sent += 1
    return sent
