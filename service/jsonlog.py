"""Application logs as JSON lines, each carrying the HTTP request id (and the job) it belongs to.

One JSON object per line: ``time`` (UTC, ISO 8601), ``level``, ``logger``, ``message``, plus
``request_id`` when the line belongs to an HTTP request or to a job that request published, and
``job_kind``/``job_id`` on a worker's lines about a job. The API sets the context per HTTP request
(service.api.metrics); the worker sets it per task from the message headers (workers.tasks).
A context variable holds it, so a line logged anywhere below (store, engine) carries it too.

Messages are whatever the code logs: no handler adds headers, query strings or bodies, so the
access log's redaction (service.access_log) stays the one place that sees those.
"""

from __future__ import annotations

import contextvars
import json
import logging
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime

# The fields the context adds to a line, in output order.
CONTEXT_FIELDS = ("request_id", "job_kind", "job_id")
# Never mutated in place: bind() sets a new dict, so sharing one default is safe.
_EMPTY: dict = {}
_CONTEXT: contextvars.ContextVar[dict] = contextvars.ContextVar("sizewise_log_context")


def current() -> dict:
    """Return the log context in force (a copy): request_id, job_kind, job_id when known."""
    return dict(_CONTEXT.get(_EMPTY))


def bind(**fields) -> contextvars.Token:
    """Add fields to the log context until :func:`unbind` with the returned token."""
    merged = dict(_CONTEXT.get(_EMPTY))
    merged.update({k: v for k, v in fields.items() if k in CONTEXT_FIELDS and v is not None})
    return _CONTEXT.set(merged)


def unbind(token: contextvars.Token) -> None:
    """Restore the log context that was in force before the matching :func:`bind`."""
    _CONTEXT.reset(token)


@contextmanager
def context(**fields) -> Iterator[None]:
    """Log with these context fields inside the block."""
    token = bind(**fields)
    try:
        yield
    finally:
        unbind(token)


class JsonFormatter(logging.Formatter):
    """Format a record as one JSON object on one line (newlines in messages stay escaped)."""

    def format(self, record: logging.LogRecord) -> str:
        line = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname,
            "logger": record.name,
            "message": record.getMessage(),
        }
        fields = _CONTEXT.get(_EMPTY)
        for key in CONTEXT_FIELDS:
            value = fields.get(key, getattr(record, key, None))
            if value is not None:
                line[key] = value
        if record.exc_info:
            line["exception"] = self.formatException(record.exc_info)
        return json.dumps(line, default=str, ensure_ascii=False)


class JsonHandler(logging.StreamHandler):
    """The handler :func:`configure` installs (recognised so a second call replaces it)."""


def configure(level: int | str = logging.INFO, stream=None) -> logging.Handler:
    """Make the root logger write JSON lines to ``stream`` (the process's real stderr).

    Idempotent: a previous JSON handler is replaced, other handlers are left alone.
    """
    root = logging.getLogger()
    for handler in list(root.handlers):
        if isinstance(handler, JsonHandler):
            root.removeHandler(handler)
    # sys.__stderr__, not sys.stderr: Celery redirects sys.stderr into logging itself.
    handler = JsonHandler(stream if stream is not None else sys.__stderr__)
    handler.setFormatter(JsonFormatter())
    root.addHandler(handler)
    root.setLevel(level)
    return handler
