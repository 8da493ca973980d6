"""The HTTP API: blueprints, problem+json errors and the OpenAPI document."""

from __future__ import annotations

from flask import Flask

from . import bundles, calculations, health, metrics, openapi, reports, requests, tokens, webhooks
from .auth import init_auth
from .errors import register_error_handlers
from .headers import init_headers


def register_api(app: Flask) -> None:
    """Register every blueprint, the error handlers and access control on ``app``."""
    for module in (
        health,
        openapi,
        calculations,
        requests,
        reports,
        bundles,
        tokens,
        metrics,
        webhooks,
    ):
        app.register_blueprint(module.bp)
    register_error_handlers(app)
    init_auth(app)
    init_headers(app)
    metrics.init_metrics(app)
