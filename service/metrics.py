"""Prometheus metrics (official client library), safe with several API and worker processes.

Counters and histograms are prometheus_client objects; when ``PROMETHEUS_MULTIPROC_DIR`` is set
(every gunicorn and worker process on a host pointing at one empty folder) they are written to
files there and ``/metrics`` merges them (the library's multiprocess mode). Job counts by job and
status are read from the database at scrape time, so they are right whatever process asks.
"""

from __future__ import annotations

import os

from prometheus_client import (
    CONTENT_TYPE_LATEST,
    CollectorRegistry,
    Counter,
    Histogram,
    generate_latest,
)
from prometheus_client.core import GaugeMetricFamily

_FAST = (0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0)
_SLOW = (0.01, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0, 300.0, 1800.0)

API_LATENCY = Histogram(
    "sizewise_api_request_seconds",
    "API response time by route (Flask endpoint), method and status code.",
    ["route", "method", "status"],
    buckets=_FAST,
)
QUEUE_WAIT = Histogram(
    "sizewise_job_queue_wait_seconds",
    "Time from submission (or rerun/exploration request) to the claim that ran the job.",
    ["job"],
    buckets=_SLOW,
)
COMPUTE_TIME = Histogram(
    "sizewise_job_compute_seconds",
    "Time from claim to stored outcome, by job and where it ran (api or worker).",
    ["job", "where"],
    buckets=_SLOW,
)
BUDGET_REFUSALS = Counter(
    "sizewise_budget_refusals_total",
    "Submissions refused for cost: per-simulation budget (422) or a token's hourly budget (429).",
    ["budget"],
)
WORK_UNITS = Counter(
    "sizewise_work_units_total",
    "Work units of split simulation batches, by who computed them (orchestrator or helper).",
    ["by"],
)


class JobCounts:
    """A collector reading job counts by job (request, rerun, exploration) and status at scrape time."""

    def __init__(self, sessionmaker):
        self.sessionmaker = sessionmaker

    def collect(self):
        from sqlalchemy import func, select

        from service.store.db import session_scope
        from service.store.jobs import JOB_KINDS

        family = GaugeMetricFamily(
            "sizewise_jobs", "Jobs in the database by job and status.", labels=["job", "status"]
        )
        with session_scope(self.sessionmaker) as session:
            for job in JOB_KINDS.values():
                rows = session.execute(
                    select(job.model.status, func.count()).group_by(job.model.status)
                ).all()
                for status, count in rows:
                    family.add_metric([job.name, status], count)
        yield family


class _Both:
    def __init__(self, *collectors):
        self.collectors = collectors

    def collect(self):
        for collector in self.collectors:
            yield from collector.collect()


def render(sessionmaker) -> tuple[bytes, str]:
    """Return (body, content type) of the metrics page for this host's processes."""
    if os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
        from prometheus_client import multiprocess

        registry = CollectorRegistry()
        multiprocess.MultiProcessCollector(registry)
    else:
        from prometheus_client import REGISTRY as registry
    return generate_latest(_Both(registry, JobCounts(sessionmaker))), CONTENT_TYPE_LATEST
