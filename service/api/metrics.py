"""GET /metrics (Prometheus text format, admin token), the API latency histogram, X-Request-Id.

Every response carries ``X-Request-Id``: the caller's own id when it is well formed (1-64 of
letters, digits and ``._:-``), else a new random one. The id is bound to the JSON log context
(service.jsonlog) for the request, so every application line carries it, travels with any job
the request publishes (a message header) and is repeated by the worker on that job's lines.
"""

from __future__ import annotations

import logging
import re
import time
import uuid

from flask import Blueprint, Flask, Response, g, request

from service import jsonlog, metrics

from .context import sessions
from .docs import operation
from .io import reject_query

bp = Blueprint("metrics", __name__)
# One line per answered request: method, route pattern (never the path or query: a report
# link's secret rides in the query), status and time; the request id comes from the context.
request_log = logging.getLogger("service.api.requests")


@bp.get("/metrics")
@operation(
    "Pipeline metrics in the Prometheus text format",
    tag="health",
    response=None,
    media_type="text/plain",
    description=(
        "Jobs by kind and status (read from the database), queue wait and compute time "
        "histograms, API latency by route, budget refusals. Needs an admin token."
    ),
    errors=(401, 403, 500, 503),
)
def metrics_page():
    """Return the metrics of every process of this host (multiprocess mode) plus job counts."""
    reject_query()
    body, content_type = metrics.render(sessions())
    return Response(body, content_type=content_type)


REQUEST_ID_HEADER = "X-Request-Id"
_REQUEST_ID = re.compile(r"^[A-Za-z0-9._:-]{1,64}$")


def _start() -> None:
    g.metrics_started = time.perf_counter()
    # A caller's well-formed id is kept (so its logs and ours can be joined); else a new one.
    sent = request.headers.get(REQUEST_ID_HEADER, "")
    g.request_id = sent if _REQUEST_ID.match(sent) else uuid.uuid4().hex
    g.log_context = jsonlog.bind(request_id=g.request_id)


def _observe(response):
    response.headers[REQUEST_ID_HEADER] = g.get("request_id") or uuid.uuid4().hex
    started = g.pop("metrics_started", None)
    route = request.url_rule.rule if request.url_rule is not None else "unmatched"
    if started is not None:
        elapsed = time.perf_counter() - started
        metrics.API_LATENCY.labels(route, request.method, str(response.status_code)).observe(
            elapsed
        )
        request_log.info(
            "%s %s %s %.1f ms", request.method, route, response.status_code, elapsed * 1000
        )
    return response


def _unbind(_exc=None) -> None:
    token = g.pop("log_context", None)
    if token is not None:
        try:
            jsonlog.unbind(token)
        except ValueError:  # bound in another context (not expected with sync workers)
            pass


def init_metrics(app: Flask) -> None:
    """Time every request (registered first, so the clock includes authentication)."""
    app.before_request_funcs.setdefault(None, []).insert(0, _start)
    app.after_request(_observe)
    app.teardown_request(_unbind)
