"""GET /metrics: the Prometheus text format (admin token), and the API latency histogram."""

from __future__ import annotations

import time

from flask import Blueprint, Flask, Response, g, request

from service import metrics

from .context import sessions
from .docs import operation
from .io import reject_query

bp = Blueprint("metrics", __name__)


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


def _start() -> None:
    g.metrics_started = time.perf_counter()


def _observe(response):
    started = g.pop("metrics_started", None)
    if started is not None:
        route = request.url_rule.rule if request.url_rule is not None else "unmatched"
        metrics.API_LATENCY.labels(route, request.method, str(response.status_code)).observe(
            time.perf_counter() - started
        )
    return response


def init_metrics(app: Flask) -> None:
    """Time every request (registered first, so the clock includes authentication)."""
    app.before_request_funcs.setdefault(None, []).insert(0, _start)
    app.after_request(_observe)
